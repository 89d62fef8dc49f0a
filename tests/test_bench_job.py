"""The whole-job benchmark (tools/bench_job.py) on a tiny generated data set, its dispatch from `bench --job`,
and the [run] DuckDB settings it measures with (duckdb_memory_limit, duckdb_spill_folder)."""

from __future__ import annotations

import re

import duckdb
import pytest

from warranty_forecast.config import load_config
from warranty_forecast.errors import ConfigError
from warranty_forecast.stages import shaping
from warranty_forecast.tools import bench, bench_job
from warranty_forecast.tools.large_extracts import write_large_extracts

# a quick job: the fewest prediction draws, no reporting-delay correction (the bench measures whatever the
# configuration says; the SQL stage and its cells do not depend on these keys)
QUICK_CONFIG = """
[forecast]
prediction_draws = 200
correct_reporting_delay = false
"""


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    # every sold unit's sale date reported (missing_sale_share=0), so no claim's clock is imputed and the
    # floors' clock (claim's, else unit's sale date) is the pipeline's
    folder = tmp_path_factory.mktemp("tiny")
    extracts = write_large_extracts(
        folder, units=12000, claims=600, products=2, build_months=18, seed=11, missing_sale_share=0.0,
        bad_rows_per_kind=2,
    )
    config = folder / "quick.toml"
    config.write_text(QUICK_CONFIG, encoding="utf-8")
    return extracts, config


def _count(pattern: str, text: str) -> tuple[int, int]:
    match = re.search(pattern + r": ([\d,]+) units, ([\d,]+) returns", text)
    assert match, pattern
    return int(match.group(1).replace(",", "")), int(match.group(2).replace(",", ""))


def test_bench_prints_every_stage_and_both_floors_and_they_agree(tiny, capsys):
    extracts, config = tiny
    code = bench_job.main([
        "--shipments", str(extracts.shipments_path), "--claims", str(extracts.claims_path), "--no-charts",
        "--config", str(config), "--memory-limit", "512MB",
    ])
    out = capsys.readouterr().out
    assert code == 0
    for part in ("shaping", "delays", "fit", "alerts", "forecast", "reserve", "intervals", "movement",
                 "diagnostics", "charts"):
        assert re.search(rf"stage {part} +\| +\d+\.\d\d \| ", out), part
    for layer in ("raw", "staging", "intermediate", "outputs"):
        assert re.search(rf"sql {layer} +\| +\d+\.\d\d \| ", out), layer
    assert re.search(r"total \(whole job; peak = VmHWM\) \| +\d+\.\d\d \| +[\d,]+", out)
    assert re.search(r"floor \(a\) bare grouping \| +\d+\.\d\d \| +[\d,]+", out)
    assert re.search(r"floor \(b\) checked, matched, aged \| +\d+\.\d\d \| +[\d,]+", out)
    assert "DuckDB memory limit 512MB" in out and "SQL stage within 2x of floor (b)" in out
    assert re.search(r"Slowest SQL models \(of \d+\):", out) and re.search(r"staging/stg_shipments +\| +\d", out)
    # floor (b) counts what the pipeline counts: units of valid rows shipped by the as-of date, and each
    # unit's first counted in-coverage claim (cohort_summary's units and returns_to_date)
    pipeline = _count("pipeline cohort_summary", out)
    assert _count(r"floor \(b\) checked, matched, aged", out) == pipeline
    assert pipeline[0] == 12000 - 2 * 9  # the planted bad shipment rows left out
    assert _count(r"floor \(a\) bare grouping", out)[0] == 12000  # no checks: every row


def test_floor_b_cells_equal_the_pipeline_cohorts(tiny, tmp_path):
    extracts, _ = tiny
    config = load_config(
        shipments_path=extracts.shipments_path, claims_path=extracts.claims_path, out_dir=tmp_path, draw_charts=False,
    )
    shaped = shaping.shape_extracts(config)
    parameters = bench_job.floor_parameters("b", as_of_date=shaped.as_of_date, run_date=config.run_date)
    cells = bench_job.floor_cells(duckdb.connect(), "b", extracts.shipments_path, extracts.claims_path, parameters)
    cells["build_month"] = cells["build_month"].dt.date
    floor = cells.groupby(["product", "build_month"]).agg(floor_units=("units", "first"), returns=("returns", "sum"))
    pipeline = shaped.cohort_summary.set_index(["product", "build_month"])[["units", "returns_to_date"]]
    joined = pipeline.join(floor, how="outer")
    assert len(joined) == len(pipeline) > 30  # the same cohorts
    assert joined["floor_units"].tolist() == joined["units"].tolist()
    assert joined["returns"].tolist() == joined["returns_to_date"].tolist()
    assert joined["returns"].sum() > 300


def test_bench_job_switch_hands_over(monkeypatch):
    seen = []
    monkeypatch.setattr(bench_job, "main", lambda argv: seen.append(argv) or 0)
    assert bench.main(["--job", "--shipments", "s.parquet", "--claims", "c.parquet"]) == 0
    assert seen == [["--shipments", "s.parquet", "--claims", "c.parquet"]]


def _settings(tmp_path, text):
    path = tmp_path / "config.toml"
    path.write_text(text, encoding="utf-8")
    return load_config(shipments_path=tmp_path / "s.csv", claims_path=tmp_path / "c.csv", out_dir=tmp_path, config_path=path)


def test_duckdb_settings_parse(tmp_path):
    assert _settings(tmp_path, "").run.duckdb_memory_limit is None
    assert _settings(tmp_path, "").run.duckdb_spill_folder is None
    assert _settings(tmp_path, '[run]\nduckdb_memory_limit = " 1.5 GiB"').run.duckdb_memory_limit == "1.5GiB"
    assert _settings(tmp_path, '[run]\nduckdb_spill_folder = "/var/tmp/wf"').run.duckdb_spill_folder == "/var/tmp/wf"
    for bad in ('"lots"', "1000000", '"10MB"', '"1 PB"'):
        with pytest.raises(ConfigError, match="run.duckdb_memory_limit must be a memory size"):
            _settings(tmp_path, f"[run]\nduckdb_memory_limit = {bad}")
    with pytest.raises(ConfigError, match="run.duckdb_spill_folder must be a folder path"):
        _settings(tmp_path, '[run]\nduckdb_spill_folder = ""')


def test_shaping_opens_duckdb_with_the_limit_and_spills_under_the_folder(tiny, tmp_path, monkeypatch):
    extracts, _ = tiny
    spill_parent = tmp_path / "spill" / "here"  # created by the run
    config = _settings(tmp_path, f'[run]\nduckdb_memory_limit = "300MB"\nduckdb_spill_folder = "{spill_parent}"')
    config = type(config)(**{**vars(config), "shipments_path": extracts.shipments_path,
                             "claims_path": extracts.claims_path})
    seen = {}
    connect = duckdb.connect

    def recording_connect(database, config):  # type: ignore[no-untyped-def]
        con = connect(database, config=config)
        seen["settings"] = dict(config)
        seen["memory_limit"] = con.execute("select current_setting('memory_limit')").fetchone()[0]
        return con

    monkeypatch.setattr(shaping.duckdb, "connect", recording_connect)
    shaping.shape_extracts(config)
    assert seen["settings"]["memory_limit"] == "300MB"
    assert seen["settings"]["temp_directory"].startswith(str(spill_parent))
    assert seen["memory_limit"] in ("286.1 MiB", "300.0 MB")  # DuckDB shows 300 MB in its own unit
    assert spill_parent.is_dir() and not list(spill_parent.iterdir())  # the run's own folder removed
