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


@pytest.fixture(scope="session")
def _demo_run_once(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo_once") / "out"
    code = main(["run", "--shipments", str(DEMO_SHIPMENTS), "--claims", str(DEMO_CLAIMS), "--out", str(out)])
    assert code == 0
    return out


@pytest.fixture(scope="module")
def demo_run_copy(_demo_run_once, tmp_path_factory) -> Path:
    """A private copy of the full demo run's output folder (its parent holds the run's lock file, as
    after a real run), made once for the module."""
    parent = tmp_path_factory.mktemp("demo") / "run"
    shutil.copytree(_demo_run_once.parent, parent)
    return parent / _demo_run_once.name


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
