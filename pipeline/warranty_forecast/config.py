"""The run configuration: one frozen object, built once from a TOML file and command-line values.

This is the only module that reads configuration files. Nothing happens at import time.

Every key is declared once, as a field of its section's settings class below, with its default and its
rule (`_key`); parsing, the unknown-key check and the manifest's copy of the settings all derive from
those fields. The README's Configuration section shows the whole file with a comment per key. Every
key is optional; an unknown key is an error, so that a typo does not pass silently.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import difflib
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, ClassVar, Mapping, Sequence

from warranty_forecast.errors import ConfigError

CLAIM_STATUSES: tuple[str, ...] = ("approved", "rejected", "no_fault_found")
FORECAST_MODELS: tuple[str, ...] = ("weibull", "lognormal", "failure_modes")


# Upper ends of the configurable limits: values past them would let one row blow up the run (a warranty
# of a billion months is a billion months in service to lay out; a sum of units must fit a 64-bit integer).
MAX_WARRANTY_MONTHS_LIMIT = 1200
MAX_UNITS_PER_ROW_LIMIT = 1_000_000_000

# A rule turns a TOML value into the setting's value or raises ValueError with what it must be.
Rule = Callable[[Any], Any]


def _key(default: Any, rule: Rule) -> Any:
    """A settings field: its default and the rule its TOML value must pass."""
    return field(default=default, metadata={"rule": rule})


def _integer(minimum: int, maximum: int | None = None) -> Rule:
    def rule(value: Any) -> int:
        if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
            raise ValueError(f"must be an integer >= {minimum}")
        if maximum is not None and value > maximum:
            raise ValueError(f"must be an integer <= {maximum:_}")
        return value
    return rule


def _number_in(low: float, high: float, *, high_included: bool, unit: str = "") -> Rule:
    interval = f"[{low:g}, {high:g}{']' if high_included else ')'}"

    def rule(value: Any) -> float:
        is_number = not isinstance(value, bool) and isinstance(value, (int, float)) and math.isfinite(value)
        if not (is_number and (low <= value <= high if high_included else low <= value < high)):
            raise ValueError(f"must be a number in {interval}{unit}")
        return float(value)
    return rule


def _rate_ratio_above_one(value: Any) -> float:
    is_number = not isinstance(value, bool) and isinstance(value, (int, float)) and math.isfinite(value)
    if not (is_number and 1.0 < value <= 100.0):
        raise ValueError("must be a number above 1 and at most 100 (a rate ratio)")
    return float(value)


def _non_negative(unit: str = "") -> Rule:
    def rule(value: Any) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
            raise ValueError(f"must be a number >= 0{unit}")
        return float(value)
    return rule


def _weibull_shape(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0.05 <= value <= 20:
        raise ValueError("must be a Weibull shape in [0.05, 20]")
    return float(value)


def _one_of(choices: Sequence[str]) -> Rule:
    def rule(value: Any) -> str:
        if value not in choices:
            raise ValueError(f"must be one of {list(choices)}")
        return value
    return rule


def _statuses(value: Any) -> tuple[str, ...]:
    if not isinstance(value, list) or not value or any(not isinstance(s, str) or s not in CLAIM_STATUSES for s in value):
        raise ValueError(f"must be a non-empty list drawn from {list(CLAIM_STATUSES)}")
    return tuple(dict.fromkeys(value))


MAX_CHART_PRODUCTS = 200


def _product_names(value: Any) -> tuple[str, ...]:
    """Product names as the extracts spell them, each once, in the order given."""
    if (
        not isinstance(value, list) or len(value) > MAX_CHART_PRODUCTS
        or any(not isinstance(name, str) or not name.strip() or len(name) > 200 for name in value)
    ):
        raise ValueError(f"must be a list of at most {MAX_CHART_PRODUCTS} product names (text, as in the extracts)")
    return tuple(dict.fromkeys(value))


MAX_SAFETY_TERMS = 50
SAFETY_TERM_LETTERS = (3, 40)  # a term's length in letters: shorter ones would match half the codes


def _safety_terms(value: Any) -> tuple[str, ...]:
    """Terms to look for in failure codes, kept lower case, each once. A code is split into words at every
    character that is not a letter, so a term is letters only (a space, digit or '_' in it could never
    match); an empty list turns the listing off."""
    low, high = SAFETY_TERM_LETTERS
    if (
        not isinstance(value, list) or len(value) > MAX_SAFETY_TERMS
        or any(not isinstance(t, str) or not low <= len(t) <= high or not t.lower().isalpha() for t in value)
    ):
        raise ValueError(
            f"must be a list of at most {MAX_SAFETY_TERMS} terms, each {low} to {high} letters (no spaces,"
            " digits or punctuation: codes are split into words at those); [] turns the listing off"
        )
    return tuple(dict.fromkeys(t.lower() for t in value))


def _boolean(value: Any) -> bool:
    if not isinstance(value, bool):
        raise ValueError("must be true or false")
    return value


def _prediction_levels(value: Any) -> tuple[float, float, float]:
    """Three probabilities lower < median < upper, the quantiles of the prediction intervals."""
    if (
        not isinstance(value, list) or len(value) != 3
        or any(isinstance(v, bool) or not isinstance(v, (int, float)) or not 0.0 < v < 1.0 for v in value)
        or not value[0] < value[1] < value[2]
    ):
        raise ValueError("must be three probabilities in (0, 1), increasing: [lower, middle, upper], e.g. [0.05, 0.5, 0.95]")
    return (float(value[0]), float(value[1]), float(value[2]))


def _by_product(rule: Rule) -> Rule:
    """A table of product -> value, each value held to `rule`; kept as sorted (product, value) pairs."""
    def table_rule(value: Any) -> tuple[tuple[str, Any], ...]:
        if not isinstance(value, Mapping):
            raise ValueError(" must be a table of product = value")
        pairs = []
        for product, item in value.items():
            try:
                pairs.append((str(product), rule(item)))
            except ValueError as error:
                raise ValueError(f".{product} {error}, got {item!r}") from None
        return tuple(sorted(pairs))
    table_rule.is_table = True  # type: ignore[attr-defined]
    return table_rule


_MEMORY_SIZE = re.compile(r"(\d+(?:\.\d+)?)\s*(KB|MB|GB|TB|KiB|MiB|GiB|TiB)", re.IGNORECASE)


def _memory_size(value: Any) -> str:
    """A DuckDB memory size such as "1GB" or "512 MiB" (at least 64 MB, below that DuckDB cannot run the
    models); kept as written, without spaces."""
    match = _MEMORY_SIZE.fullmatch(value.strip()) if isinstance(value, str) else None
    factor = {"kb": 1e3, "mb": 1e6, "gb": 1e9, "tb": 1e12, "kib": 2**10, "mib": 2**20, "gib": 2**30, "tib": 2**40}
    if match is None or float(match.group(1)) * factor[match.group(2).lower()] < 64e6:
        raise ValueError('must be a memory size of at least 64MB such as "1GB", "512MB" or "2GiB"')
    return f"{match.group(1)}{match.group(2)}"


def _spark_master(value: Any) -> str:
    if not isinstance(value, str) or not value.strip():
        raise ValueError("must be a Spark master URL such as 'local[2]', 'yarn' or 'spark://host:7077'")
    return value.strip()


def _folder(value: Any) -> str:
    if not isinstance(value, str) or not value.strip() or "\0" in value:
        raise ValueError("must be a folder path (text)")
    return value


ENGINES = ("duckdb", "spark")  # the shaping stage's engines: same models, same tables


@dataclass(frozen=True)
class RunSettings:
    """[run]: when to warn about stale extracts and when to refuse a run; DuckDB's memory and spill folder."""

    max_data_gap_days: int = _key(7, _integer(0))  # days between the as-of date and the newest data, or the run date
    max_quarantined_share: float = _key(0.05, _number_in(0.0, 1.0, high_included=True))  # above: exit 6
    # the SQL stage's DuckDB memory limit ("1GB"); None: DuckDB's default (80% of the machine's memory).
    # Past it DuckDB spills to duckdb_spill_folder (operators that cannot spill fail with an out-of-memory error)
    duckdb_memory_limit: str | None = _key(None, _memory_size)
    # where the run's own spill folder is made (created if missing; the run's folder is removed when the SQL
    # stage ends); None: the system's temporary folder (TMPDIR)
    duckdb_spill_folder: str | None = _key(None, _folder)
    # worker processes for the per-product fits when there are many product lines (32 or more); 0: every core
    workers: int = _key(0, _integer(0, 256))
    # the shaping stage's engine when --engine is not given: duckdb, or spark (README: Running the shaping on
    # Spark); and the Spark master URL when --spark-master is not given (None: $WARRANTY_FORECAST_SPARK_MASTER,
    # else local[2]). Both operational: the run id names a Spark run by its engine, not by these keys.
    engine: str = _key("duckdb", _one_of(ENGINES))
    spark_master: str | None = _key(None, _spark_master)


@dataclass(frozen=True)
class WarrantySettings:
    """[warranty]: coverage lengths in months."""

    default_months: int = _key(24, _integer(1))  # for shipment rows without warranty_months (<= max_months)
    max_months: int = _key(240, _integer(1, MAX_WARRANTY_MONTHS_LIMIT))  # longer: the row is quarantined

    def check(self) -> None:
        if self.default_months > self.max_months:
            raise ValueError(f"default_months must be an integer <= {self.max_months:_}, got {self.default_months!r}")


@dataclass(frozen=True)
class ShipmentSettings:
    """[shipments]: limits on a shipments row."""

    max_units_per_row: int = _key(MAX_UNITS_PER_ROW_LIMIT, _integer(1, MAX_UNITS_PER_ROW_LIMIT))


@dataclass(frozen=True)
class ClaimSettings:
    """[claims]: which claims count as returns.

    `counted_statuses` lists the decided statuses that count (from approved, rejected, no_fault_found). The
    `open_statuses` (not a key) mean "filed, not yet decided": such a claim is always counted, as a known
    liability, and reserved at its estimated cost (stages.reserve); the words are fixed, any case, as in
    sql/staging/stg_claims.sql and sql/intermediate/claims_assigned_to_sale_month_groups.sql."""

    counted_statuses: tuple[str, ...] = _key(("approved",), _statuses)
    open_statuses: ClassVar[tuple[str, ...]] = ("open", "pending")


def _currency(value: Any) -> str:
    """A three-letter currency code (ISO 4217 style), kept upper case."""
    if not isinstance(value, str) or len(value) != 3 or not (value.isascii() and value.isalpha()):
        raise ValueError('must be a three-letter currency code such as "EUR" (ISO 4217)')
    return value.upper()


# yearly rates for inflation and discounting: 0.03 is 3% a year
RATE_LIMITS = (-0.5, 1.0)
_YEARLY_RATE = " (a yearly rate: 0.03 is 3%)"


def _rates_by_year(value: Any) -> tuple[float, ...]:
    """Yearly discount rates for years 1, 2, ... after the as-of date (at most 100); [] means none."""
    low, high = RATE_LIMITS
    if (
        not isinstance(value, list) or len(value) > 100
        or any(isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or not low <= v <= high
               for v in value)
    ):
        raise ValueError(
            f"must be a list of at most 100 yearly rates, each a number in [{low:g}, {high:g}] (0.06 is 6%),"
            " for years 1, 2, ... after the as-of date; [] uses annual_discount_rate"
        )
    return tuple(float(v) for v in value)


@dataclass(frozen=True)
class ReserveSettings:
    """[reserve]: the cost per claim (currency units), the currency's code, cost inflation and discounting.

    Rates are yearly fractions (0.03 is 3% a year), compounded annually over the time from the as-of date to
    the middle of each expected claim's calendar month (stages.reserve.years_from_as_of)."""

    cost_per_claim: float | None = _key(None, _non_negative(" (currency units)"))  # None: observed costs
    cost_window_months: int = _key(12, _integer(1))  # trailing window for the observed mean cost
    cost_per_claim_by_product: tuple[tuple[str, float], ...] = _key((), _by_product(_non_negative(" (currency units)")))
    # the claims extract's currency, shown beside every amount; "XXX" is ISO 4217's code for "no currency":
    # the amounts are in whatever currency the claims extract's costs are in, until this names it
    currency: str = _key("XXX", _currency)
    # cost per claim grows by this each year from the as-of date to the month of each expected claim
    annual_inflation_rate: float = _key(0.0, _number_in(*RATE_LIMITS, high_included=True, unit=_YEARLY_RATE))
    # reserve_discounted: each claim's cost discounted to the as-of date at this yearly rate ...
    annual_discount_rate: float = _key(0.0, _number_in(*RATE_LIMITS, high_included=True, unit=_YEARLY_RATE))
    # ... or at these rates, one per year after the as-of date (spot rates; beyond the list, the last one)
    discount_rate_by_year: tuple[float, ...] = _key((), _rates_by_year)
    # the cost of handling a claim that is rejected or found no fault (inspection, freight, admin; currency
    # units), reserved on the expected number of such claims; 0: none
    handling_cost_per_claim: float = _key(0.0, _non_negative(" (currency units)"))

    def check(self) -> None:
        if self.discount_rate_by_year and self.annual_discount_rate != 0.0:
            raise ValueError(
                "discount_rate_by_year and annual_discount_rate are both set: set one of them"
            )

    def override_for(self, product: str) -> float | None:
        """The configured cost per claim (currency units) for a product, or None to use observed costs."""
        return dict(self.cost_per_claim_by_product).get(product, self.cost_per_claim)

    def discount_rate_for_year(self, year: int) -> float:
        """The yearly discount rate for claims in year `year` (1 = the first year after the as-of date)."""
        if year < 1:
            raise ValueError(f"year must be >= 1, got {year!r}")
        rates = self.discount_rate_by_year
        return rates[min(year, len(rates)) - 1] if rates else self.annual_discount_rate


@dataclass(frozen=True)
class LifeModelSettings:
    """[life_model]: fitting, bounds, forecast model and the thresholds of its warnings."""

    confidence_level: float = _key(0.95, _number_in(0.5, 1.0, high_included=False))
    min_returns: int = _key(5, _integer(2))
    fixed_shape: float | None = _key(None, _weibull_shape)  # None: both parameters fitted
    fixed_shape_by_product: tuple[tuple[str, float], ...] = _key((), _by_product(_weibull_shape))
    min_returns_per_mode: int = _key(20, _integer(2))
    forecast_model: str = _key("weibull", _one_of(FORECAST_MODELS))
    aic_threshold: float = _key(10.0, _non_negative())  # warn when the lognormal's AIC is lower by more
    goodness_of_fit_warning_p_value: float = _key(0.001, _number_in(0.0, 1.0, high_included=False))

    def fixed_shape_for(self, product: str) -> float | None:
        """The configured Weibull shape for a product (engineering experience), or None."""
        return dict(self.fixed_shape_by_product).get(product, self.fixed_shape)


@dataclass(frozen=True)
class ForecastSettings:
    """[forecast]: what the forecast adds to the life model's expected returns, and its intervals."""

    # claims of failures before the as-of date not yet filed: estimate the failure-to-claim delay, fit the
    # life on the likelihood that allows for it and forecast those failures (expected_unreported_returns)
    correct_reporting_delay: bool = _key(True, _boolean)
    max_reporting_delay_days: int = _key(180, _integer(1, 3650))  # longer delays are left out of the estimate
    min_delay_claims: int = _key(50, _integer(1))  # fewer claims: the product uses the pooled delays
    # repeat claims of repaired serialised units (Nelson's mean cumulative function by months since the
    # first claim) forecast beside the first failures (expected_repeat_claims)
    forecast_repeat_claims: bool = _key(True, _boolean)
    # prediction intervals: quantiles of future claims and reserve from a seeded predictive simulation
    prediction_levels: tuple[float, float, float] = _key((0.05, 0.5, 0.95), _prediction_levels)
    prediction_draws: int = _key(2000, _integer(200, 100_000))
    prediction_seed: int = _key(20261203, _integer(0))


@dataclass(frozen=True)
class AlertSettings:
    """[alerts]: when a build month's returns are flagged against its product's baseline life model; which
    failure codes are listed apart as mentioning safety-relevant terms."""

    early_life_months: int = _key(3, _integer(1, MAX_WARRANTY_MONTHS_LIMIT))  # the early-life view: MIS 1..K
    false_discovery_rate: float = _key(0.05, _number_in(0.0, 1.0, high_included=False))  # BH q at or below: significant
    min_ratio: float = _key(1.5, _number_in(1.0, math.inf, high_included=False))  # observed / expected at least this
    # the CUSUM over build months in production order: the rate ratio it is designed to catch, and its
    # threshold's in-control average run length in build months (set by simulation each run)
    cusum_shift: float = _key(1.5, _rate_ratio_above_one)
    cusum_in_control_run_length: int = _key(2000, _integer(10, 1_000_000))
    # claims whose failure_code holds a term (any case), starting where one of the code's words starts
    # (words: runs of letters; the separators between them skipped) are listed apart (safety_term_claims):
    # "overheat" matches OVERHEATING, OVER_HEAT; "fire" matches FIRE, FIRED, NO_FIRE, not FIRMWARE or MISFIRE
    safety_terms: tuple[str, ...] = _key(("overheat", "smok", "fire", "burn", "shock"), _safety_terms)


@dataclass(frozen=True)
class ChartSettings:
    """[charts]: how many product lines the per-product charts draw; every product stays in the tables."""

    # the product lines with flagged build months first, then by reserve, largest first
    max_products: int = _key(12, _integer(1, 200))
    # product lines always drawn, first and in this order (an engineer following a line); they take places of
    # max_products, and all are drawn when there are more of them; a name not in the extracts is warned about
    products: tuple[str, ...] = _key((), _product_names)


@dataclass(frozen=True)
class RunConfig:
    """Everything one nightly run needs; passed down to every stage."""

    shipments_path: Path
    claims_path: Path
    out_dir: Path
    as_of_date: dt.date | None = None  # None: the newest valid claim_date or ship_date of the extracts
    run_date: dt.date = field(default_factory=dt.date.today)  # the day of the run; no input date may be later
    config_path: Path | None = None
    draw_charts: bool = True  # False (--no-charts): tables, report and manifest only, no PNG charts
    engine: str = "duckdb"  # the shaping stage's engine (--engine): duckdb, or spark (stages/spark_engine.py)
    spark_master: str | None = None  # --spark-master; None: $WARRANTY_FORECAST_SPARK_MASTER, else local[2]
    run: RunSettings = field(default_factory=RunSettings)
    warranty: WarrantySettings = field(default_factory=WarrantySettings)
    shipments: ShipmentSettings = field(default_factory=ShipmentSettings)
    claims: ClaimSettings = field(default_factory=ClaimSettings)
    reserve: ReserveSettings = field(default_factory=ReserveSettings)
    life_model: LifeModelSettings = field(default_factory=LifeModelSettings)
    alerts: AlertSettings = field(default_factory=AlertSettings)
    charts: ChartSettings = field(default_factory=ChartSettings)
    forecast: ForecastSettings = field(default_factory=ForecastSettings)


def parse_date(text: str, what: str) -> dt.date:
    """Parse an ISO date (YYYY-MM-DD), raising ConfigError that names `what`."""
    try:
        return dt.date.fromisoformat(text)
    except ValueError:
        raise ConfigError(f"{what}: {text!r} is not a date in YYYY-MM-DD form") from None


def load_config(
    *,
    shipments_path: Path,
    claims_path: Path,
    out_dir: Path,
    as_of_date: dt.date | None = None,
    config_path: Path | None = None,
    run_date: dt.date | None = None,
    draw_charts: bool = True,
    engine: str | None = None,
    spark_master: str | None = None,
) -> RunConfig:
    """Build the run configuration from an optional TOML file and the command-line values.

    `run_date` defaults to today's date; an as-of date after it is a ConfigError. `engine` and
    `spark_master` (the command line's) win over [run] engine / spark_master; the engine defaults to duckdb.
    """
    run_date = dt.date.today() if run_date is None else run_date
    if engine is not None and engine not in ENGINES:
        raise ConfigError(f"--engine {engine!r} is not one of {', '.join(ENGINES)}")
    if as_of_date is not None and as_of_date > run_date:
        raise ConfigError(
            f"--as-of {as_of_date} is after the run date {run_date}: the as-of date cannot be in the future"
        )
    document: Mapping[str, Any] = {}
    if config_path is not None:
        try:
            with open(config_path, "rb") as handle:
                document = tomllib.load(handle)
        except FileNotFoundError:
            raise ConfigError(f"config file {config_path} does not exist") from None
        except UnicodeDecodeError as error:
            raise ConfigError(
                f"config file {config_path} is not UTF-8 text (byte 0x{error.object[error.start]:02x} at"
                f" position {error.start}); save it as UTF-8"
            ) from None
        except tomllib.TOMLDecodeError as error:
            raise ConfigError(f"config file {config_path} is not valid TOML: {error}") from None
        except OSError as error:
            raise ConfigError(f"config file {config_path} cannot be read: {error}") from None
    source = str(config_path) if config_path else "defaults"
    settings = settings_from_document(document, source)
    return RunConfig(
        shipments_path=shipments_path,
        claims_path=claims_path,
        out_dir=out_dir,
        as_of_date=as_of_date,
        run_date=run_date,
        config_path=config_path,
        draw_charts=draw_charts,
        engine=engine or settings["run"].engine,
        spark_master=spark_master or settings["run"].spark_master,
        **settings,
    )


def check_products_in_data(config: RunConfig, known_products: Sequence[str]) -> None:
    """Raise ConfigError when a per-product key names a product the shipments extract does not hold.

    Unknown keys are errors so that a typo does not pass silently; a product name is only known once the
    data is read, so this runs after shaping. The message names the closest known product.
    """
    known = sorted(set(known_products))
    source = str(config.config_path) if config.config_path else "defaults"
    for table, pairs in _by_product_settings(config):
        for name, _ in pairs:
            if name in known:
                continue
            closest = difflib.get_close_matches(name, known, n=1, cutoff=0.0)
            hint = f"; did you mean {closest[0]!r}?" if closest else ""
            raise ConfigError(
                f"{source}: {table}.{name} names a product that is not in the shipments extract{hint}"
                f" (products: {known})"
            )


# The TOML tables, each the name of a RunConfig field and its settings class.
SECTIONS: dict[str, type] = {
    "run": RunSettings,
    "warranty": WarrantySettings,
    "shipments": ShipmentSettings,
    "claims": ClaimSettings,
    "reserve": ReserveSettings,
    "life_model": LifeModelSettings,
    "alerts": AlertSettings,
    "forecast": ForecastSettings,
    "charts": ChartSettings,
}


def settings_from_document(document: Mapping[str, Any], source: str) -> dict[str, Any]:
    """Validate a parsed TOML document; return the settings objects keyed as RunConfig fields."""
    _reject_unknown(document, set(SECTIONS), source, "")
    return {name: _section(settings, _table(document, name, source), source, name) for name, settings in SECTIONS.items()}


def _by_product_settings(config: RunConfig) -> list[tuple[str, tuple[tuple[str, Any], ...]]]:
    """Every per-product table in force, as (dotted key, (product, value) pairs), found from the fields' rules."""
    return [
        (f"{name}.{item.name}", getattr(getattr(config, name), item.name))
        for name, settings in SECTIONS.items()
        for item in dataclasses.fields(settings)
        if getattr(item.metadata.get("rule"), "is_table", False)
    ]


def settings_as_document(config: RunConfig) -> dict[str, dict[str, Any]]:
    """The settings in force, as TOML-shaped tables (for the manifest): by-product pairs as tables."""
    document = {}
    for name in SECTIONS:
        section = getattr(config, name)
        document[name] = {
            item.name: (dict(value) if getattr(item.metadata.get("rule"), "is_table", False) else
                        list(value) if isinstance(value, tuple) else value)
            for item in dataclasses.fields(section)
            for value in (getattr(section, item.name),)
        }
    return document


def _section(settings: type, table: Mapping[str, Any], source: str, name: str) -> Any:
    keys = {item.name: item for item in dataclasses.fields(settings)}
    _reject_unknown(table, set(keys), source, f"{name}.")
    values = {}
    for key, value in table.items():
        rule = keys[key].metadata["rule"]
        try:
            values[key] = rule(value)
        except ValueError as error:
            detail = f"{error}" if getattr(rule, "is_table", False) else f" {error}, got {value!r}"
            raise ConfigError(f"{source}: {name}.{key}{detail}") from None
    section = settings(**values)
    check = getattr(section, "check", None)
    if check is not None:
        try:
            check()
        except ValueError as error:
            raise ConfigError(f"{source}: {name}.{error}") from None
    return section


def _table(document: Mapping[str, Any], key: str, source: str) -> Mapping[str, Any]:
    value = document.get(key, {})
    if not isinstance(value, Mapping):
        raise ConfigError(f"{source}: [{key}] must be a table")
    return value


def _reject_unknown(table: Mapping[str, Any], known: set[str], source: str, prefix: str) -> None:
    unknown = sorted(set(table) - known)
    if unknown:
        raise ConfigError(f"{source}: unknown key(s) {', '.join(prefix + k for k in unknown)}; known: {sorted(known)}")
