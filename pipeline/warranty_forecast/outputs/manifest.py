"""The run's manifest as a typed object: what was read, how it was reconciled, the settings in force,
the warnings, the timings and the versions. `publish` writes it as manifest.json, last, with the
producer marker and the written files added; the report reads it.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import platform
from dataclasses import dataclass
from functools import lru_cache
from importlib import metadata, resources
from pathlib import Path
from typing import Any, Mapping

import pandas as pd

from warranty_forecast.config import RunConfig, settings_as_document
from warranty_forecast.outputs.publish import sha256_of
from warranty_forecast.stages.shaping import ShapedData

_PACKAGES = ("warranty-forecast", "pandas", "numpy", "scipy", "duckdb", "pyarrow", "matplotlib")


@dataclass(frozen=True)
class InputFile:
    """One extract as read: where, its fingerprint, its rows and the columns it carried beyond the contract."""

    extract: str
    path: str
    source_file: str
    sha256: str
    bytes: int
    rows_read: int
    ignored_columns: tuple[str, ...]


@dataclass(frozen=True)
class RunManifest:
    """Everything the manifest records about one run (dates as dates, times in UTC, seconds as floats)."""

    as_of_date: dt.date
    as_of_source: str
    run_date: dt.date
    freshness: Mapping[str, Any]
    started_utc: dt.datetime
    finished_utc: dt.datetime
    seconds_total: float
    inputs: tuple[InputFile, ...]
    reconciliation: tuple[Mapping[str, Any], ...]
    facts: Mapping[str, int]
    quarantine_by_reason: Mapping[str, int]
    config_path: str | None
    settings: Mapping[str, Mapping[str, Any]]
    warnings: tuple[str, ...]
    seconds_by_stage: Mapping[str, float]
    seconds_by_sql_layer: Mapping[str, float]
    versions: Mapping[str, str]
    charts_drawn: bool = True
    engine: str = "duckdb"  # where the shaping ran (--engine)

    @property
    def run_id(self) -> str:
        """The run's id: its as-of date and a fingerprint of what it computed from (the extracts' SHA-256, the
        settings in force, the package version and a fingerprint of its code (`code_fingerprint`), and whether
        charts were left out), e.g.
        `2026-11-30-3f9a0c1b2d4e`; a run shaped on another engine than DuckDB has its own id (floating sums may
        differ in the last bit between engines). A rerun with the same inputs, settings and as-of date has the same id; the
        run date and the timings do not enter it."""
        basis = json.dumps(
            {
                "as_of_date": self.as_of_date.isoformat(),
                "inputs": [[item.extract, item.sha256] for item in self.inputs],
                "settings": _computing_settings(self.settings),
                "version": self.versions.get("warranty-forecast", ""),
                "code": self.versions.get(CODE_KEY, ""),
                **({} if self.charts_drawn else {"charts": False}),
                **({} if self.engine == "duckdb" else {"engine": self.engine}),
            },
            sort_keys=True, default=str,
        )
        return f"{self.as_of_date.isoformat()}-{hashlib.sha256(basis.encode('utf-8')).hexdigest()[:12]}"

    def to_document(self) -> dict[str, Any]:
        """The manifest as JSON-ready data, in the order manifest.json shows it."""
        return {
            "run_id": self.run_id,
            "as_of_date": self.as_of_date.isoformat(),
            "as_of_source": self.as_of_source,
            "run_date": self.run_date.isoformat(),
            "freshness": dict(self.freshness),
            "started_utc": self.started_utc.isoformat(timespec="seconds"),
            "inputs": [
                {**vars(item), "ignored_columns": list(item.ignored_columns)} for item in self.inputs
            ],
            "reconciliation": [dict(row) for row in self.reconciliation],
            "facts": dict(self.facts),
            "quarantine_by_reason": dict(self.quarantine_by_reason),
            "config": {"path": self.config_path, **{name: dict(table) for name, table in self.settings.items()}},
            "warnings": list(self.warnings),
            "seconds_by_stage": dict(self.seconds_by_stage),
            "seconds_by_sql_layer": dict(self.seconds_by_sql_layer),
            "versions": dict(self.versions),
            "charts_drawn": self.charts_drawn,
            "engine": self.engine,
            "finished_utc": self.finished_utc.isoformat(timespec="seconds"),
            "seconds_total": self.seconds_total,
        }


def run_manifest(
    config: RunConfig,
    shaped: ShapedData,
    *,
    warnings: tuple[str, ...],
    started_utc: dt.datetime,
    finished_utc: dt.datetime,
    seconds_by_stage: Mapping[str, float],
    seconds_total: float,
) -> RunManifest:
    """The manifest of a run whose stages are done (the input files are fingerprinted here)."""
    reconciliation = shaped.reconciliation.set_index("extract")
    inputs = tuple(
        _input_file(name, path, reconciliation.loc[name], shaped.ignored_columns[name])
        for name, path in (("shipments", config.shipments_path), ("claims", config.claims_path))
    )
    return RunManifest(
        as_of_date=shaped.as_of_date,
        as_of_source=shaped.as_of_source,
        run_date=config.run_date,
        freshness=shaped.freshness.as_manifest(),
        started_utc=started_utc,
        finished_utc=finished_utc,
        seconds_total=round(seconds_total, 3),
        inputs=inputs,
        reconciliation=tuple(
            {key: (value if isinstance(value, str) else int(value)) for key, value in row.items()}
            for row in shaped.reconciliation.to_dict(orient="records")
        ),
        facts=dict(sorted(shaped.run_facts.items())),
        quarantine_by_reason=_quarantine_counts(shaped.quarantine),
        config_path=str(config.config_path) if config.config_path else None,
        settings=settings_as_document(config),
        warnings=warnings,
        seconds_by_stage=dict(seconds_by_stage),
        seconds_by_sql_layer={layer: round(seconds, 4) for layer, seconds in shaped.seconds_by_layer.items()},
        versions={
            "python": platform.python_version(), **{package: _version(package) for package in _PACKAGES},
            CODE_KEY: code_fingerprint(),
        },
        charts_drawn=config.draw_charts,
        engine=getattr(config, "engine", "duckdb"),
    )


def _input_file(extract: str, path: Path, reconciled: pd.Series, ignored: list[str]) -> InputFile:
    return InputFile(
        extract=extract,
        path=str(path),
        source_file=str(reconciled["source_file"]),
        sha256=sha256_of(path),
        bytes=path.stat().st_size,
        rows_read=int(reconciled["rows_read"]),
        ignored_columns=tuple(ignored),
    )


def _quarantine_counts(quarantine: pd.DataFrame) -> dict[str, int]:
    counts = quarantine.groupby(["extract", "column", "reason"]).size()
    return {f"{extract}:{column}:{reason}": int(count) for (extract, column, reason), count in counts.items()}


CODE_KEY = "warranty-forecast-code"

# settings that change how a run computes (memory, spill folder, processes), never what: left out of the run id
OPERATIONAL_SETTINGS = {"run": ("duckdb_memory_limit", "duckdb_spill_folder", "workers", "engine", "spark_master")}


def _computing_settings(settings: Mapping[str, Any]) -> dict[str, Any]:
    """The settings that can change a run's numbers: all but OPERATIONAL_SETTINGS."""
    return {
        name: {key: value for key, value in dict(table).items() if key not in OPERATIONAL_SETTINGS.get(name, ())}
        for name, table in settings.items()
    }


@lru_cache(maxsize=1)
def code_fingerprint() -> str:
    """The first 12 hex digits of the SHA-256 over the package's Python files and its SQL models (relative
    path and bytes, in path order; the models found as the SQL stage finds them, in an editable install the
    tree's sql/): a changed program gives another run id even when its version number stayed."""
    package = Path(__file__).resolve().parents[1]
    models = Path(str(resources.files("warranty_forecast.sql")))
    files = sorted(
        [(f"py/{path.relative_to(package).as_posix()}", path) for path in package.rglob("*.py") if path.is_file()
         and "sql" not in path.relative_to(package).parts[:1]]
        + [(f"sql/{path.relative_to(models).as_posix()}", path) for path in models.rglob("*.sql") if path.is_file()]
    )
    digest = hashlib.sha256()
    for name, path in files:
        digest.update(name.encode("utf-8") + b"\0" + path.read_bytes() + b"\0")
    return digest.hexdigest()[:12]


def _version(package: str) -> str:
    try:
        return metadata.version(package)
    except metadata.PackageNotFoundError:
        return "not installed"
