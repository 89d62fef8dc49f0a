"""Shared fixtures. The full demo run (charts included) is made once per session and copied to each
module that wants it, so a module that reruns into its copy cannot disturb another's reading."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from warranty_forecast.cli import main

ROOT = Path(__file__).resolve().parents[1]
DEMO_SHIPMENTS = ROOT / "data_demo" / "shipments.parquet"
DEMO_CLAIMS = ROOT / "data_demo" / "claims.csv"
DEMO_MONTH_BEFORE = "2026-10-31"  # the month end before the demo's as-of date, 2026-11-30


@pytest.fixture(scope="session")
def _demo_run_once(tmp_path_factory) -> Path:
    """The output root of the demo run a month apart, as finance runs it: as of 2026-10-31 (no charts), then the
    full demo run as of 2026-11-30 (the latest, with its roll-forward from the first): runs/<run id>/ twice,
    latest, history.duckdb."""
    out = tmp_path_factory.mktemp("demo_once") / "out"
    extracts = ["--shipments", str(DEMO_SHIPMENTS), "--claims", str(DEMO_CLAIMS), "--out", str(out)]
    assert main(["run", *extracts, "--as-of", DEMO_MONTH_BEFORE, "--no-charts"]) == 0
    assert main(["run", *extracts]) == 0
    return out


@pytest.fixture(scope="module")
def demo_root_copy(_demo_run_once, tmp_path_factory) -> Path:
    """A private copy of the full demo run's output root (its parent holds the root's lock file, as after a
    real run; `latest` stays a link), made once for the module."""
    parent = tmp_path_factory.mktemp("demo") / "run"
    shutil.copytree(_demo_run_once.parent, parent, symlinks=True)
    return parent / _demo_run_once.name


@pytest.fixture(scope="module")
def demo_run_copy(demo_root_copy) -> Path:
    """The run folder of the module's copy of the full demo run, reached through its `latest` link."""
    return demo_root_copy / "latest"


@pytest.fixture
def con():
    """An in-memory DuckDB connection with the project's SQL macros, for tests of single models."""
    import duckdb

    from warranty_forecast.stages import sql_runner

    connection = duckdb.connect(":memory:")
    for macros in sql_runner.MACRO_FILES:
        sql_runner.run_statements(connection, macros)
    yield connection
    connection.close()
