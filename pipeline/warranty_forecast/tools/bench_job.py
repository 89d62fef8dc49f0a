"""Benchmark of the whole nightly job (issue 11): wall time and peak memory per stage and per SQL layer,
beside two floors written as plain DuckDB queries.

    warranty-forecast bench --job --shipments S --claims C [--no-charts] [--memory-limit 1GB] [--config F]
    python -m warranty_forecast.tools.bench_job --shipments S --claims C [...]

The job: `run.run_nightly` in this process, with the configuration `config.load_config` builds (the
output root in a temporary folder, removed afterwards). Times per stage are the run's own
(`RunManifest.seconds_by_stage`, `seconds_by_sql_layer`); "other" is the rest of the wall time (between
stages, the reports, publishing, the history database). Memory: a background thread reads the process's
resident set (VmRSS in /proc/self/status) every 20 ms and attributes each sample to the stage (and SQL
layer) running then, which the bench learns by wrapping `run._StageClock.run`, `shaping.load_extract`
(the raw layer) and `run_model` (in sql_runner and extracts: seconds and peak per SQL model) for the
bench's duration; the job's peak is the process's
high-water mark VmHWM. A stage shorter than the sampling interval may show no sample ("-").

The floors, each in a fresh process (so its memory is its own) with a fresh DuckDB connection:

(a) one bare query that groups the units per product x build month and the claims per product x build
    month x months in service (from the claim's sale date, else its build month), no checks;
(b) one hand-written query that also applies the contract's row checks (required values, parsed values,
    bounds, date order, unique serials among otherwise valid rows, unique claim ids), keeps what the
    as-of date knows, matches claims to units on serial (product and build month must agree, no failure
    before the unit's sale), puts each claim on its clock (its sale date, else its unit's, else its
    unit's ship date, else its build month), ages it in months in service on the day grid, keeps the
    counted claims within warranty and counts each unit's first one as the return.

It is a report, not a test: it prints the table and the issue's targets with whether each is met, and
exits 0 whatever the figures (1 only when the job or a floor fails, 2 on a bad argument).
"""

from __future__ import annotations

import argparse
import contextlib
import dataclasses
import datetime as dt
import json
import os
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator, Mapping, Sequence

import duckdb
import pandas as pd

SAMPLE_SECONDS = 0.02
STAGE_OTHER = "other"  # between the stages: reports, publishing, the history, the latest link
SHAPING_OTHER = "other"  # inside shaping: macros, planning, reading the outputs back, the checks
SQL_LAYERS = ("raw", "staging", "intermediate", "outputs")
TOP_MODELS = 8  # the slowest SQL models listed under the table
DAYS_PER_MONTH = 365.25 / 12

# the targets (printed beside the figures; they never change the exit code)
TARGET_10M = (10_000_000, 360_000, 8.0, 2.0)  # units, claims, seconds, GB
TARGET_20M = (20_000_000, 2_000_000, 20.0)
TARGET_SQL_OVER_FLOOR = 2.0
TARGET_MANY_PRODUCTS = (2_000, 60, 60.0)  # products, build months, seconds
_SIZE_TOLERANCE = 0.05  # a data set within 5% of a target's sizes is judged against it


# ------------------------------------------------------------------------------------------- memory

def _status_kib(key: str) -> int | None:
    """A field of /proc/self/status in KiB (VmRSS, VmHWM), or None where there is no /proc."""
    try:
        with open("/proc/self/status", encoding="ascii") as handle:
            for line in handle:
                if line.startswith(key + ":"):
                    return int(line.split()[1])
    except OSError:
        return None
    return None


class RssSampler:
    """Samples VmRSS every `interval` seconds in a daemon thread; keeps the peak per label (the stage and
    the SQL layer running, set with `label`). Use as a context manager."""

    def __init__(self, interval: float = SAMPLE_SECONDS) -> None:
        self.interval = interval
        self.stage: str = STAGE_OTHER
        self.layer: str | None = None
        self.peak_by_stage: dict[str, int] = {}
        self.peak_by_layer: dict[str, int] = {}
        self.seconds_by_model: dict[str, float] = {}
        self.peak_by_model: dict[str, int] = {}
        self.model: str | None = None
        self.peak = 0
        self.samples = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, name="rss-sampler", daemon=True)

    def _record(self) -> None:
        rss = _status_kib("VmRSS")
        if rss is None:
            return
        self.samples += 1
        self.peak = max(self.peak, rss)
        stage, layer, model = self.stage, self.layer, self.model
        self.peak_by_stage[stage] = max(self.peak_by_stage.get(stage, 0), rss)
        if layer is not None:
            self.peak_by_layer[layer] = max(self.peak_by_layer.get(layer, 0), rss)
        if model is not None:
            self.peak_by_model[model] = max(self.peak_by_model.get(model, 0), rss)

    def _loop(self) -> None:
        while not self._stop.wait(self.interval):
            self._record()

    @contextlib.contextmanager
    def label(self, stage: str | None = None, layer: str | None = None) -> Iterator[None]:
        """Attribute samples to `stage` (and `layer`) while the block runs; one sample at each end, so a
        short block still has one."""
        before = (self.stage, self.layer)
        if stage is not None:
            self.stage = stage
        self.layer = layer
        self._record()
        try:
            yield
        finally:
            self._record()
            self.stage, self.layer = before

    def __enter__(self) -> "RssSampler":
        self._record()
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()
        self._record()


@contextlib.contextmanager
def _instrumented(sampler: RssSampler) -> Iterator[None]:
    """Wrap the run's stage clock, the raw layer's loader and the model runner so the sampler knows which
    stage and SQL layer run; restored on the way out."""
    from warranty_forecast import run as run_module
    from warranty_forecast.stages import extracts, shaping, sql_runner

    clock_run = run_module._StageClock.run
    load_extract = shaping.load_extract
    run_model = sql_runner.run_model

    def timed_stage(self: Any, stage: str, work: Callable[[], Any], describe: Callable[[Any], str]) -> Any:
        with sampler.label(stage=stage, layer=SHAPING_OTHER if stage == "shaping" else None):
            return clock_run(self, stage, work, describe)

    def raw_layer(*args: Any, **kwargs: Any) -> Any:
        with sampler.label(layer="raw"):
            return load_extract(*args, **kwargs)

    def layer_model(con: Any, model: str, *args: Any, **kwargs: Any) -> Any:
        layer = model.split("/", 1)[0] if "/" in model else SHAPING_OTHER
        name = kwargs.get("table") or (args[1] if len(args) > 1 else None) or model
        started = time.perf_counter()
        sampler.model = name
        try:
            with sampler.label(layer=layer if layer in SQL_LAYERS else SHAPING_OTHER):
                return run_model(con, model, *args, **kwargs)
        finally:
            sampler.model = None
            sampler.seconds_by_model[name] = sampler.seconds_by_model.get(name, 0.0) + time.perf_counter() - started

    run_module._StageClock.run = timed_stage  # type: ignore[method-assign]
    shaping.load_extract = raw_layer  # type: ignore[assignment]
    sql_runner.run_model = layer_model  # type: ignore[assignment]
    extracts.run_model = layer_model  # type: ignore[assignment]  (the raw models, by their tables)
    try:
        yield
    finally:
        run_module._StageClock.run = clock_run  # type: ignore[method-assign]
        shaping.load_extract = load_extract
        sql_runner.run_model = run_model
        extracts.run_model = run_model


# --------------------------------------------------------------------------------------------- the job

@dataclass(frozen=True)
class JobMeasure:
    """One run of the whole job: seconds (wall) and peak resident memory (KiB) per stage and SQL layer."""

    seconds_total: float
    seconds_by_stage: Mapping[str, float]
    seconds_by_layer: Mapping[str, float]
    peak_kib_by_stage: Mapping[str, int]
    peak_kib_by_layer: Mapping[str, int]
    seconds_by_model: Mapping[str, float]  # each SQL model (raw ones by their table), wall seconds
    peak_kib_by_model: Mapping[str, int]
    peak_kib: int  # VmHWM at the end (the process's high-water mark, including what came before the job)
    rss_before_kib: int
    as_of_date: dt.date
    units_rows: int
    claims_rows: int
    products: int
    build_months: int
    cohort_summary: pd.DataFrame = field(repr=False)

    @property
    def seconds_sql(self) -> float:
        return float(self.seconds_by_stage.get("shaping", 0.0))


def run_job(config: Any) -> JobMeasure:
    """Run `run.run_nightly(config)` in this process under the sampler; the shaped cohort summary is kept
    (by wrapping `run.shape_extracts`) for the comparison with the floors."""
    from warranty_forecast import run as run_module

    kept: dict[str, Any] = {}
    shape_extracts = run_module.shape_extracts

    def keeping(cfg: Any) -> Any:
        shaped = shape_extracts(cfg)
        kept["shaped"] = shaped
        return shaped

    rss_before = _status_kib("VmRSS") or 0
    run_module.shape_extracts = keeping  # type: ignore[assignment]
    try:
        with RssSampler() as sampler, _instrumented(sampler):
            started = time.perf_counter()
            result = run_module.run_nightly(config)
            seconds_total = time.perf_counter() - started
    finally:
        run_module.shape_extracts = shape_extracts  # type: ignore[assignment]
    manifest = result.manifest
    shaped = kept["shaped"]
    stages = dict(manifest.seconds_by_stage) if manifest is not None else {}
    stages[STAGE_OTHER] = max(0.0, seconds_total - sum(stages.values()))
    layers = dict(shaped.seconds_by_layer)
    layers[SHAPING_OTHER] = max(0.0, stages.get("shaping", 0.0) - sum(layers.values()))
    reconciliation = shaped.reconciliation.set_index("extract")
    cohorts = shaped.cohort_summary
    return JobMeasure(
        seconds_total=seconds_total,
        seconds_by_stage=stages,
        seconds_by_layer=layers,
        peak_kib_by_stage=dict(sampler.peak_by_stage),
        peak_kib_by_layer=dict(sampler.peak_by_layer),
        seconds_by_model=dict(sampler.seconds_by_model),
        peak_kib_by_model=dict(sampler.peak_by_model),
        peak_kib=max(_status_kib("VmHWM") or 0, sampler.peak),
        rss_before_kib=rss_before,
        as_of_date=shaped.as_of_date,
        units_rows=int(reconciliation.loc["shipments", "rows_read"]),
        claims_rows=int(reconciliation.loc["claims", "rows_read"]),
        products=int(cohorts["product"].nunique()),
        build_months=int(cohorts["build_month"].nunique()),
        cohort_summary=cohorts[["product", "build_month", "units", "returns_to_date"]].copy(),
    )


# ------------------------------------------------------------------------------------------ the floors

def _source(path: Path, parameter: str) -> str:
    """The table function reading an extract, with a 0-based row_number column; the path stays a
    parameter (`$shipments` / `$claims`)."""
    if path.suffix.lower() == ".parquet":
        return f"(select file_row_number as row_number, * from read_parquet(${parameter}, file_row_number = true))"
    return f"(select row_number() over () - 1 as row_number, * from read_csv(${parameter}, header = true, all_varchar = true))"


FLOOR_A = """
with units as (
    select product, build_month::varchar as build_month, count(*) as units
    from {shipments}
    group by all
),
returns as (
    select
        product,
        build_month::varchar as build_month,
        greatest(1, ceil(date_diff('day',
            coalesce(try_cast(sale_date as date), try_cast(build_month::varchar || '-01' as date)),
            try_cast(failure_date as date)) / (365.25 / 12)))::integer as months_in_service,
        count(*) as returns
    from {claims}
    group by all
)
select units.product, units.build_month, returns.months_in_service, units.units, coalesce(returns.returns, 0) as returns
from units left join returns using (product, build_month)
"""

# The contract's row checks as one query (README "Input contract"; the staging models hold the same
# checks with reasons). Dates: parsed, 1900-01-01 .. the run date; build_month `YYYY-MM` or a date.
FLOOR_B = """
with shipment_rows as (
    select
        row_number,
        nullif(trim(product::varchar), '') as product,
        nullif(trim(build_month::varchar), '') as build_month_text,
        nullif(trim(ship_date::varchar), '') as ship_date_text,
        nullif(trim(sale_date::varchar), '') as sale_date_text,
        nullif(trim(units::varchar), '') as units_text,
        nullif(trim(warranty_months::varchar), '') as warranty_text,
        nullif(trim(serial::varchar), '') as serial
    from {shipments}
),
shipments_typed as (
    select
        *,
        case when regexp_full_match(build_month_text, '\\d{{4}}-\\d{{2}}') then try_strptime(build_month_text, '%Y-%m')::date
             else date_trunc('month', try_cast(build_month_text as date))::date end as build_month,
        try_cast(ship_date_text as date) as ship_date,
        try_cast(sale_date_text as date) as sale_date,
        try_cast(units_text as double) as units_number,
        try_cast(warranty_text as double) as warranty_number
    from shipment_rows
),
shipments_checked as (
    select
        *,
        product is not null
        and build_month between date '1900-01-01' and $run_date
        and ship_date between date '1900-01-01' and $run_date
        and (sale_date_text is null or sale_date between date '1900-01-01' and $run_date)
        and (units_text is null or (isfinite(units_number) and units_number = floor(units_number)
                                    and units_number between 1 and $max_units_per_row))
        and (warranty_text is null or (isfinite(warranty_number) and warranty_number = floor(warranty_number)
                                       and warranty_number between 1 and $max_warranty_months))
        and ship_date >= build_month
        and (sale_date is null or sale_date >= ship_date)
        and (serial is null or coalesce(units_number, 1) = 1) as passes_row_checks
    from shipments_typed
),
units as (
    select
        row_number, product, build_month, ship_date, serial,
        case when sale_date <= $as_of_date then sale_date end as known_sale_date,
        coalesce(units_number, 1)::bigint as units,
        coalesce(warranty_number, $default_warranty_months)::integer as warranty_months
    from shipments_checked
    where passes_row_checks
    qualify (serial is null or row_number() over (partition by serial order by row_number) = 1)
        and ship_date <= $as_of_date
),
cohorts as (
    select product, build_month, sum(units) as units, min(warranty_months) as warranty_months
    from units
    group by product, build_month
),
claim_rows as (
    select
        row_number,
        nullif(trim(claim_id::varchar), '') as claim_id,
        nullif(trim(product::varchar), '') as product,
        nullif(trim(build_month::varchar), '') as build_month_text,
        nullif(trim(sale_date::varchar), '') as sale_date_text,
        nullif(trim(failure_date::varchar), '') as failure_date_text,
        nullif(trim(claim_date::varchar), '') as claim_date_text,
        nullif(trim(cost::varchar), '') as cost_text,
        coalesce(lower(nullif(trim(status::varchar), '')), 'approved') as status,
        nullif(trim(serial::varchar), '') as serial
    from {claims}
),
claims_typed as (
    select
        *,
        case when regexp_full_match(build_month_text, '\\d{{4}}-\\d{{2}}') then try_strptime(build_month_text, '%Y-%m')::date
             else date_trunc('month', try_cast(build_month_text as date))::date end as build_month,
        try_cast(sale_date_text as date) as sale_date,
        try_cast(failure_date_text as date) as failure_date,
        try_cast(claim_date_text as date) as claim_date,
        try_cast(cost_text as double) as cost
    from claim_rows
),
claims_checked as (
    select *
    from claims_typed
    where claim_id is not null and product is not null
        and build_month between date '1900-01-01' and $run_date
        and failure_date between date '1900-01-01' and $run_date
        and claim_date between date '1900-01-01' and $run_date
        and (sale_date_text is null or sale_date between date '1900-01-01' and $run_date)
        and (cost_text is not null or status in ('open', 'pending'))
        and (cost_text is null or (cost is not null and cost >= 0))
        and status in ('approved', 'rejected', 'no_fault_found', 'open', 'pending')
        and claim_date >= failure_date
        and (sale_date is null or failure_date >= sale_date)
        and failure_date >= build_month
    qualify row_number() over (partition by claim_id order by row_number) = 1
),
claims_on_clock as (
    select
        claims.product, claims.build_month, claims.serial, claims.claim_id, claims.failure_date, claims.claim_date,
        claims.status,
        coalesce(units.warranty_months, cohorts.warranty_months) as warranty_months,
        greatest(1, ceil(date_diff('day',
            coalesce(claims.sale_date, units.known_sale_date, units.ship_date, claims.build_month),
            claims.failure_date) / (365.25 / 12)))::integer as months_in_service
    from claims_checked as claims
    join cohorts on cohorts.product = claims.product and cohorts.build_month = claims.build_month
    left join units on units.serial = claims.serial
    where claims.claim_date <= $as_of_date
        and (units.serial is null or (units.product = claims.product and units.build_month = claims.build_month
                                      and (units.known_sale_date is null or claims.failure_date >= units.known_sale_date)))
),
first_counted_claims as (
    select product, build_month, months_in_service
    from claims_on_clock
    where (list_contains($counted_statuses, status) or status in ('open', 'pending'))
        and months_in_service <= warranty_months
    qualify row_number() over (
        partition by product, build_month, coalesce(serial, 'claim ' || claim_id)
        order by failure_date, claim_date, claim_id
    ) = 1
),
returns as (
    select product, build_month, months_in_service, count(*) as returns
    from first_counted_claims
    group by product, build_month, months_in_service
)
select cohorts.product, cohorts.build_month, returns.months_in_service, cohorts.units,
       coalesce(returns.returns, 0) as returns
from cohorts left join returns using (product, build_month)
"""


@dataclass(frozen=True)
class FloorMeasure:
    """One floor query: wall seconds (the query and fetching its cells), peak resident memory (KiB) of
    its process, and its cells' totals."""

    name: str
    seconds: float
    peak_kib: int
    cells: int
    units: int
    returns: int


def floor_parameters(
    kind: str, *, as_of_date: dt.date, run_date: dt.date, max_units_per_row: int = 1_000_000_000,
    max_warranty_months: int = 240, default_warranty_months: int = 24,
    counted_statuses: Sequence[str] = ("approved",),
) -> dict[str, Any]:
    if kind == "a":
        return {}
    return {
        "as_of_date": as_of_date, "run_date": run_date, "max_units_per_row": max_units_per_row,
        "max_warranty_months": max_warranty_months, "default_warranty_months": default_warranty_months,
        "counted_statuses": list(counted_statuses),
    }


def floor_cells(
    con: duckdb.DuckDBPyConnection, kind: str, shipments: Path, claims: Path, parameters: Mapping[str, Any],
) -> pd.DataFrame:
    """Run floor `kind` ("a" or "b") on one connection: the cells (product, build_month,
    months_in_service, units of the cohort, returns); a cohort without returns has one row with
    months_in_service NULL."""
    if kind not in ("a", "b"):
        raise ValueError(f"kind must be 'a' or 'b', got {kind!r}")
    template = FLOOR_A if kind == "a" else FLOOR_B
    sql = template.format(shipments=_source(Path(shipments), "shipments"), claims=_source(Path(claims), "claims"))
    return con.execute(sql, {"shipments": str(shipments), "claims": str(claims), **parameters}).fetch_df()


def cell_totals(cells: pd.DataFrame) -> tuple[int, int]:
    """(units, returns) of floor cells: each cohort's units once, every cell's returns."""
    units = cells.drop_duplicates(["product", "build_month"])["units"].sum()
    return int(units), int(cells["returns"].sum())


def measure_floor_here(
    kind: str, shipments: Path, claims: Path, parameters: Mapping[str, Any], memory_limit: str | None = None,
) -> FloorMeasure:
    """Time floor `kind` on a fresh connection in this process, with the RSS sampler running."""
    with RssSampler() as sampler:
        started = time.perf_counter()
        config = {"memory_limit": memory_limit} if memory_limit else {}
        with tempfile.TemporaryDirectory(prefix="bench-floor-") as spill:
            con = duckdb.connect(":memory:", config={"temp_directory": spill, **config})
            try:
                cells = floor_cells(con, kind, shipments, claims, parameters)
            finally:
                con.close()
        seconds = time.perf_counter() - started
    units, returns = cell_totals(cells)
    return FloorMeasure(
        name=kind, seconds=seconds, peak_kib=max(_status_kib("VmHWM") or 0, sampler.peak), cells=len(cells),
        units=units, returns=returns,
    )


def measure_floor(
    kind: str, shipments: Path, claims: Path, parameters: Mapping[str, Any], memory_limit: str | None = None,
) -> FloorMeasure:
    """Floor `kind` in a fresh Python process (`--floor`), so its peak memory is its own."""
    document = {
        "kind": kind, "shipments": str(shipments), "claims": str(claims), "memory_limit": memory_limit,
        "parameters": {k: (v.isoformat() if isinstance(v, dt.date) else v) for k, v in parameters.items()},
    }
    completed = subprocess.run(
        [sys.executable, "-m", "warranty_forecast.tools.bench_job", "--floor", json.dumps(document)],
        capture_output=True, text=True, check=False, env={**os.environ, "PYTHONHASHSEED": "0"},
    )
    if completed.returncode != 0:
        raise RuntimeError(f"floor ({kind}) failed: {completed.stderr.strip()[-2000:]}")
    return FloorMeasure(**json.loads(completed.stdout.strip().splitlines()[-1]))


def _floor_child(text: str) -> int:
    document = json.loads(text)
    parameters = {
        k: (dt.date.fromisoformat(v) if k in ("as_of_date", "run_date") else v)
        for k, v in document["parameters"].items()
    }
    measure = measure_floor_here(
        document["kind"], Path(document["shipments"]), Path(document["claims"]), parameters, document["memory_limit"],
    )
    print(json.dumps(dataclasses.asdict(measure)))
    return 0


# ------------------------------------------------------------------------------------------- the report

def _mb(kib: int | None) -> str:
    return "-" if not kib else f"{kib / 1024:,.0f}"


def _seconds(value: float | None) -> str:
    return "-" if value is None else f"{value:.2f}"


def _near(value: int, target: int) -> bool:
    return abs(value - target) <= _SIZE_TOLERANCE * target


def _verdict(met: bool) -> str:
    return "MET" if met else "NOT MET"


def targets(job: JobMeasure, floor_b: FloorMeasure | None) -> list[str]:
    """The issue's targets, each with whether this data set is the one it is about and whether it is met."""
    lines = []
    units, claims, seconds, gigabytes = TARGET_10M
    applies = _near(job.units_rows, units) and _near(job.claims_rows, claims)
    peak_gb = job.peak_kib / 1024**2
    lines.append(
        f"10 M units + 0.36 M claims end to end <= {seconds:g} s and <= {gigabytes:g} GB peak: "
        + (f"{_verdict(job.seconds_total <= seconds and peak_gb <= gigabytes)} ({job.seconds_total:.1f} s, "
           f"{peak_gb:.2f} GB)" if applies else "not this data set")
    )
    units, claims, seconds = TARGET_20M
    applies = _near(job.units_rows, units) and _near(job.claims_rows, claims)
    lines.append(
        f"20 M units + 2 M claims end to end <= {seconds:g} s: "
        + (f"{_verdict(job.seconds_total <= seconds)} ({job.seconds_total:.1f} s, {peak_gb:.2f} GB peak)"
           if applies else "not this data set")
    )
    if floor_b is not None and floor_b.seconds > 0:
        ratio = job.seconds_sql / floor_b.seconds
        lines.append(
            f"SQL stage within {TARGET_SQL_OVER_FLOOR:g}x of floor (b): {_verdict(ratio <= TARGET_SQL_OVER_FLOOR)}"
            f" ({job.seconds_sql:.2f} s / {floor_b.seconds:.2f} s = {ratio:.1f}x)"
        )
    products, build_months, seconds = TARGET_MANY_PRODUCTS
    applies = _near(job.products, products) and job.build_months >= build_months
    lines.append(
        f"{products:,} products x {build_months} build months end to end <= {seconds:g} s: "
        + (f"{_verdict(job.seconds_total <= seconds)} ({job.seconds_total:.1f} s)" if applies else "not this data set")
    )
    return lines


def report(
    job: JobMeasure, floors: Sequence[FloorMeasure], *, shipments: Path, claims: Path, charts: bool,
    memory_limit: str | None,
) -> str:
    from warranty_forecast.tools.bench import format_table

    rows: list[list[str]] = []
    for stage, seconds in job.seconds_by_stage.items():
        if stage == STAGE_OTHER:
            continue
        rows.append([f"stage {stage}", _seconds(seconds), _mb(job.peak_kib_by_stage.get(stage))])
        if stage == "shaping":
            for layer in (*SQL_LAYERS, SHAPING_OTHER):
                label = f"  sql {layer}" if layer != SHAPING_OTHER else "  sql other (macros, read back, checks)"
                rows.append([label, _seconds(job.seconds_by_layer.get(layer)), _mb(job.peak_kib_by_layer.get(layer))])
    rows.append(["other (reports, publish, history)", _seconds(job.seconds_by_stage.get(STAGE_OTHER)),
                 _mb(job.peak_kib_by_stage.get(STAGE_OTHER))])
    rows.append(["total (whole job; peak = VmHWM)", _seconds(job.seconds_total), _mb(job.peak_kib)])
    names = {"a": "floor (a) bare grouping", "b": "floor (b) checked, matched, aged"}
    for floor in floors:
        rows.append([names.get(floor.name, floor.name), _seconds(floor.seconds), _mb(floor.peak_kib)])
    parts = [
        f"Whole job on {shipments} ({job.units_rows:,} rows) and {claims} ({job.claims_rows:,} rows):"
        f" {job.products:,} products x {job.build_months} build months, as of {job.as_of_date};"
        f" charts {'drawn' if charts else 'not drawn'}; DuckDB memory limit {memory_limit or 'default'}",
        f"peak MB: the largest resident set sampled every {SAMPLE_SECONDS * 1000:g} ms while the part ran"
        f" (process RSS before the job {_mb(job.rss_before_kib)} MB); floors each in a fresh process",
        "",
        format_table(("part", "wall s", "peak MB"), rows),
        "",
        "Cells (units, returns counted):",
    ]
    pipeline_units = int(job.cohort_summary["units"].sum())
    pipeline_returns = int(job.cohort_summary["returns_to_date"].sum())
    parts.append(f"  pipeline cohort_summary: {pipeline_units:,} units, {pipeline_returns:,} returns")
    for floor in floors:
        parts.append(f"  {names.get(floor.name, floor.name)}: {floor.units:,} units, {floor.returns:,} returns"
                     f" in {floor.cells:,} cells")
    floor_b = next((f for f in floors if f.name == "b"), None)
    slowest = sorted(job.seconds_by_model.items(), key=lambda item: -item[1])[:TOP_MODELS]
    if slowest:
        parts += ["", f"Slowest SQL models (of {len(job.seconds_by_model)}):", format_table(
            ("model", "wall s", "peak MB"),
            [[name, _seconds(seconds), _mb(job.peak_kib_by_model.get(name))] for name, seconds in slowest],
        )]
    parts += ["", "Targets (issue 11; a benchmark, not a test)", *(f"  {line}" for line in targets(job, floor_b))]
    return "\n".join(parts)


# ---------------------------------------------------------------------------------------------- command

def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="warranty-forecast bench --job",
        allow_abbrev=False,
        description="Run the whole nightly job on the extracts and print wall time and peak memory per stage"
        " and SQL layer, beside two plain DuckDB floors.",
    )
    parser.add_argument("--shipments", type=Path, required=True)
    parser.add_argument("--claims", type=Path, required=True)
    parser.add_argument("--config", type=Path, default=None, help="TOML configuration (as for run)")
    parser.add_argument("--as-of", type=dt.date.fromisoformat, default=None, help="as for run (default: newest data)")
    parser.add_argument("--no-charts", action="store_true", help="leave the charts out (as for run)")
    parser.add_argument("--memory-limit", default=None, help="DuckDB memory limit, e.g. 1GB ([run] duckdb_memory_limit)")
    parser.add_argument("--no-floors", action="store_true", help="time the job only")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the bench and print its report to stdout; 0 whatever the figures."""
    arguments = list(sys.argv[1:] if argv is None else argv)
    if arguments[:1] == ["--floor"] and len(arguments) == 2:
        return _floor_child(arguments[1])
    parsed = build_parser().parse_args([a for a in arguments if a != "--job"])
    from warranty_forecast.config import load_config
    from warranty_forecast.errors import PipelineError

    try:
        with tempfile.TemporaryDirectory(prefix="bench-job-") as workspace:
            config = load_config(
                shipments_path=parsed.shipments, claims_path=parsed.claims, out_dir=Path(workspace) / "out",
                as_of_date=parsed.as_of, config_path=parsed.config, draw_charts=not parsed.no_charts,
            )
            if parsed.memory_limit is not None:
                config = with_memory_limit(config, parsed.memory_limit)
            job = run_job(config)
        floors: list[FloorMeasure] = []
        if not parsed.no_floors:
            for kind in ("a", "b"):
                parameters = floor_parameters(
                    kind, as_of_date=job.as_of_date, run_date=config.run_date,
                    max_units_per_row=config.shipments.max_units_per_row,
                    max_warranty_months=config.warranty.max_months,
                    default_warranty_months=config.warranty.default_months,
                    counted_statuses=config.claims.counted_statuses,
                )
                floors.append(measure_floor(
                    kind, parsed.shipments, parsed.claims, parameters,
                    getattr(config.run, "duckdb_memory_limit", None),
                ))
    except (PipelineError, RuntimeError, ValueError, OSError) as error:
        print(f"error: bench failed: {type(error).__name__}: {error}", file=sys.stderr)
        return 1
    print(report(job, floors, shipments=parsed.shipments, claims=parsed.claims, charts=not parsed.no_charts,
                 memory_limit=getattr(config.run, "duckdb_memory_limit", None)))
    return 0


def with_memory_limit(config: Any, memory_limit: str) -> Any:
    """`config` with [run] duckdb_memory_limit set (held to the setting's rule)."""
    from warranty_forecast.config import RunSettings

    rule = next(item for item in dataclasses.fields(RunSettings) if item.name == "duckdb_memory_limit").metadata["rule"]
    return dataclasses.replace(config, run=dataclasses.replace(config.run, duckdb_memory_limit=rule(memory_limit)))


if __name__ == "__main__":
    raise SystemExit(main())
