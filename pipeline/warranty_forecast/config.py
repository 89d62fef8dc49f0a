"""The run configuration: one frozen object, built once from a TOML file and command-line values.

This is the only module that reads configuration files. Nothing happens at import time.

TOML keys (every key optional; unknown keys are an error so that typos do not pass silently):

```toml
[run]
max_data_gap_days = 7            # warn when the as-of date trails the run date, or an extract's newest date
                                 # trails the as-of date, by more days than this
max_quarantined_share = 0.05     # stop (exit 6, nothing published) when more of an extract's rows are quarantined

[warranty]
default_months = 24              # coverage length (months) for shipment rows without warranty_months
max_months = 240                 # a shipment row with a longer warranty_months is quarantined

[shipments]
max_units_per_row = 1000000000   # a shipment row with more units is quarantined

[claims]
counted_statuses = ["approved"]  # claim statuses that count as returns in the life model

[reserve]
cost_per_claim = 85.0            # currency units; overrides the observed mean cost for every product
cost_window_months = 12          # trailing window (months before the as-of date) for the mean cost
[reserve.cost_per_claim_by_product]
WP10 = 90.0                      # per-product override; wins over cost_per_claim

[life_model]
confidence_level = 0.95          # two-sided level of every confidence bound (Wald and likelihood-ratio)
min_returns = 5                  # fewer counted returns: fixed-shape fit if a shape is configured, else none
fixed_shape = 1.5                # shape from engineering experience for thin or unidentifiable data
min_returns_per_mode = 20        # failure codes with fewer returns fold into "other"
forecast_model = "weibull"       # "weibull", "lognormal" or "failure_modes" (competing risks by code)
aic_threshold = 10.0             # warn when the lognormal AIC beats the Weibull by more than this
[life_model.fixed_shape_by_product]
QHT-360 = 2.5                    # per-product shape; wins over fixed_shape
```
"""

from __future__ import annotations

import datetime as dt
import difflib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

from warranty_forecast.errors import ConfigError

CLAIM_STATUSES: tuple[str, ...] = ("approved", "rejected", "no_fault_found")
FORECAST_MODELS: tuple[str, ...] = ("weibull", "lognormal", "failure_modes")


# Upper ends of the configurable limits: values past them would let one row blow up the run (a warranty
# of a billion months is a billion months in service to lay out; a sum of units must fit a 64-bit integer).
MAX_WARRANTY_MONTHS_LIMIT = 1200
MAX_UNITS_PER_ROW_LIMIT = 1_000_000_000


@dataclass(frozen=True)
class RunSettings:
    max_data_gap_days: int = 7
    max_quarantined_share: float = 0.05


@dataclass(frozen=True)
class WarrantySettings:
    default_months: int = 24
    max_months: int = 240


@dataclass(frozen=True)
class ShipmentSettings:
    max_units_per_row: int = MAX_UNITS_PER_ROW_LIMIT


@dataclass(frozen=True)
class ClaimSettings:
    counted_statuses: tuple[str, ...] = ("approved",)


@dataclass(frozen=True)
class ReserveSettings:
    cost_per_claim: float | None = None
    cost_window_months: int = 12
    cost_per_claim_by_product: tuple[tuple[str, float], ...] = ()

    def override_for(self, product: str) -> float | None:
        """The configured cost per claim (currency units) for a product, or None to use observed costs."""
        for name, cost in self.cost_per_claim_by_product:
            if name == product:
                return cost
        return self.cost_per_claim


@dataclass(frozen=True)
class LifeModelSettings:
    confidence_level: float = 0.95
    min_returns: int = 5
    fixed_shape: float | None = None
    fixed_shape_by_product: tuple[tuple[str, float], ...] = ()
    min_returns_per_mode: int = 20
    forecast_model: str = "weibull"
    aic_threshold: float = 10.0

    def fixed_shape_for(self, product: str) -> float | None:
        """The configured Weibull shape for a product (engineering experience), or None."""
        for name, shape in self.fixed_shape_by_product:
            if name == product:
                return shape
        return self.fixed_shape


@dataclass(frozen=True)
class RunConfig:
    """Everything one nightly run needs; passed down to every stage."""

    shipments_path: Path
    claims_path: Path
    out_dir: Path
    as_of_date: dt.date | None = None  # None: the newest valid claim_date or ship_date of the extracts
    run_date: dt.date = field(default_factory=dt.date.today)  # the day of the run; no input date may be later
    config_path: Path | None = None
    run: RunSettings = field(default_factory=RunSettings)
    warranty: WarrantySettings = field(default_factory=WarrantySettings)
    shipments: ShipmentSettings = field(default_factory=ShipmentSettings)
    claims: ClaimSettings = field(default_factory=ClaimSettings)
    reserve: ReserveSettings = field(default_factory=ReserveSettings)
    life_model: LifeModelSettings = field(default_factory=LifeModelSettings)


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
) -> RunConfig:
    """Build the run configuration from an optional TOML file and the command-line values.

    `run_date` defaults to today's date; an as-of date after it is a ConfigError.
    """
    run_date = dt.date.today() if run_date is None else run_date
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
    return RunConfig(
        shipments_path=shipments_path,
        claims_path=claims_path,
        out_dir=out_dir,
        as_of_date=as_of_date,
        run_date=run_date,
        config_path=config_path,
        **settings_from_document(document, source),
    )


def check_products_in_data(config: RunConfig, known_products: Sequence[str]) -> None:
    """Raise ConfigError when a per-product key names a product the shipments extract does not hold.

    Unknown keys are errors so that a typo does not pass silently; a product name is only known once the
    data is read, so this runs after shaping. The message names the closest known product.
    """
    known = sorted(set(known_products))
    source = str(config.config_path) if config.config_path else "defaults"
    for table, names in (
        ("reserve.cost_per_claim_by_product", [name for name, _ in config.reserve.cost_per_claim_by_product]),
        ("life_model.fixed_shape_by_product", [name for name, _ in config.life_model.fixed_shape_by_product]),
    ):
        for name in names:
            if name in known:
                continue
            closest = difflib.get_close_matches(name, known, n=1, cutoff=0.0)
            hint = f"; did you mean {closest[0]!r}?" if closest else ""
            raise ConfigError(
                f"{source}: {table}.{name} names a product that is not in the shipments extract{hint}"
                f" (products: {known})"
            )


def settings_from_document(document: Mapping[str, Any], source: str) -> dict[str, Any]:
    """Validate a parsed TOML document; return the settings objects keyed as RunConfig fields."""
    _reject_unknown(document, {"run", "warranty", "shipments", "claims", "reserve", "life_model"}, source, "")
    run = _table(document, "run", source)
    warranty = _table(document, "warranty", source)
    shipments = _table(document, "shipments", source)
    claims = _table(document, "claims", source)
    reserve = _table(document, "reserve", source)
    life_model = _table(document, "life_model", source)
    _reject_unknown(run, {"max_data_gap_days", "max_quarantined_share"}, source, "run.")
    _reject_unknown(warranty, {"default_months", "max_months"}, source, "warranty.")
    _reject_unknown(shipments, {"max_units_per_row"}, source, "shipments.")
    _reject_unknown(claims, {"counted_statuses"}, source, "claims.")
    _reject_unknown(
        reserve, {"cost_per_claim", "cost_window_months", "cost_per_claim_by_product"}, source, "reserve."
    )
    _reject_unknown(
        life_model,
        {
            "confidence_level", "min_returns", "fixed_shape", "fixed_shape_by_product", "min_returns_per_mode",
            "forecast_model", "aic_threshold",
        },
        source,
        "life_model.",
    )

    max_months = _int(
        warranty, "max_months", 240, source, "warranty.", minimum=1, maximum=MAX_WARRANTY_MONTHS_LIMIT
    )
    default_months = _int(warranty, "default_months", 24, source, "warranty.", minimum=1, maximum=max_months)
    share = run.get("max_quarantined_share", 0.05)
    if isinstance(share, bool) or not isinstance(share, (int, float)) or not 0.0 <= float(share) <= 1.0:
        raise ConfigError(f"{source}: run.max_quarantined_share must be a number in [0, 1], got {share!r}")
    statuses = claims.get("counted_statuses", ["approved"])
    if (
        not isinstance(statuses, list)
        or not statuses
        or any(not isinstance(s, str) or s not in CLAIM_STATUSES for s in statuses)
    ):
        raise ConfigError(
            f"{source}: claims.counted_statuses must be a non-empty list drawn from {list(CLAIM_STATUSES)},"
            f" got {statuses!r}"
        )
    by_product_table = _table(reserve, "cost_per_claim_by_product", source)
    by_product = tuple(
        sorted(
            (str(name), _cost(by_product_table, name, source, "reserve.cost_per_claim_by_product."))
            for name in by_product_table
        )
    )
    cost = _cost(reserve, "cost_per_claim", source, "reserve.") if "cost_per_claim" in reserve else None
    shapes_by_product = _table(life_model, "fixed_shape_by_product", source)
    forecast_model = life_model.get("forecast_model", "weibull")
    if forecast_model not in FORECAST_MODELS:
        raise ConfigError(
            f"{source}: life_model.forecast_model must be one of {list(FORECAST_MODELS)}, got {forecast_model!r}"
        )
    level = life_model.get("confidence_level", 0.95)
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0.5 <= float(level) < 1.0:
        raise ConfigError(f"{source}: life_model.confidence_level must be a number in [0.5, 1), got {level!r}")
    return {
        "run": RunSettings(
            max_data_gap_days=_int(run, "max_data_gap_days", 7, source, "run.", minimum=0),
            max_quarantined_share=float(share),
        ),
        "warranty": WarrantySettings(default_months=default_months, max_months=max_months),
        "shipments": ShipmentSettings(
            max_units_per_row=_int(
                shipments, "max_units_per_row", MAX_UNITS_PER_ROW_LIMIT, source, "shipments.",
                minimum=1, maximum=MAX_UNITS_PER_ROW_LIMIT,
            )
        ),
        "claims": ClaimSettings(counted_statuses=tuple(dict.fromkeys(statuses))),
        "reserve": ReserveSettings(
            cost_per_claim=cost,
            cost_window_months=_int(reserve, "cost_window_months", 12, source, "reserve.", minimum=1),
            cost_per_claim_by_product=by_product,
        ),
        "life_model": LifeModelSettings(
            confidence_level=float(level),
            min_returns=_int(life_model, "min_returns", 5, source, "life_model.", minimum=2),
            fixed_shape=_shape(life_model, "fixed_shape", source, "life_model.") if "fixed_shape" in life_model else None,
            fixed_shape_by_product=tuple(
                sorted(
                    (str(name), _shape(shapes_by_product, name, source, "life_model.fixed_shape_by_product."))
                    for name in shapes_by_product
                )
            ),
            min_returns_per_mode=_int(life_model, "min_returns_per_mode", 20, source, "life_model.", minimum=2),
            forecast_model=forecast_model,
            aic_threshold=_number(life_model, "aic_threshold", source, "life_model.", "")
            if "aic_threshold" in life_model
            else 10.0,
        ),
    }


def _table(document: Mapping[str, Any], key: str, source: str) -> Mapping[str, Any]:
    value = document.get(key, {})
    if not isinstance(value, Mapping):
        raise ConfigError(f"{source}: [{key}] must be a table")
    return value


def _reject_unknown(table: Mapping[str, Any], known: set[str], source: str, prefix: str) -> None:
    unknown = sorted(set(table) - known)
    if unknown:
        raise ConfigError(f"{source}: unknown key(s) {', '.join(prefix + k for k in unknown)}; known: {sorted(known)}")


def _int(
    table: Mapping[str, Any], key: str, default: int, source: str, prefix: str, *, minimum: int,
    maximum: int | None = None,
) -> int:
    value = table.get(key, default)
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        raise ConfigError(f"{source}: {prefix}{key} must be an integer >= {minimum}, got {value!r}")
    if maximum is not None and value > maximum:
        raise ConfigError(f"{source}: {prefix}{key} must be an integer <= {maximum:_}, got {value!r}")
    return value


def _shape(table: Mapping[str, Any], key: str, source: str, prefix: str) -> float:
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0.05 <= value <= 20:
        raise ConfigError(f"{source}: {prefix}{key} must be a Weibull shape in [0.05, 20], got {value!r}")
    return float(value)


def _number(table: Mapping[str, Any], key: str, source: str, prefix: str, unit: str) -> float:
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
        raise ConfigError(f"{source}: {prefix}{key} must be a number >= 0{unit}, got {value!r}")
    return float(value)


def _cost(table: Mapping[str, Any], key: str, source: str, prefix: str) -> float:
    return _number(table, key, source, prefix, " (currency units)")
