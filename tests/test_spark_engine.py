"""The shaping stage on Spark SQL (stages/spark_engine.py) against the DuckDB stage.

The models are transpiled from DuckDB's dialect with sqlglot; these tests hold the Spark engine to the
DuckDB engine's output tables, frame-equal, on the hand-written rows of tests/test_shaping.py and on the
demo data, and check the traps one by one on both engines. One local SparkSession
(`local[2]`) serves the module. Skipped when the optional extra (`.[spark]`: pyspark, sqlglot) is not
installed; `make test` installs it.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import logging
import os
import re
from pathlib import Path

import duckdb
import pandas as pd
import pytest

pytest.importorskip("sqlglot", reason="the Spark engine's extra is not installed (pip install -e '.[spark]')")
pytest.importorskip("pyspark", reason="the Spark engine's extra is not installed (pip install -e '.[spark]')")

from conftest import DEMO_CLAIMS, DEMO_SHIPMENTS  # noqa: E402
from test_shaping import CLAIMS, SHIPMENTS, config_for, write_extracts  # noqa: E402

from warranty_forecast.config import load_config  # noqa: E402
from warranty_forecast.stages import spark_engine, sql_runner  # noqa: E402
from warranty_forecast.stages.shaping import ShapedData, shape_extracts  # noqa: E402

# Values for every parameter a model may use (the transpiler needs a value for each $name it binds).
SAMPLE_PARAMETERS = {
    "run_date": dt.date(2025, 12, 31),
    "max_units_per_row": 1_000_000,
    "max_warranty_months": 240,
    "as_of_date": dt.date(2024, 12, 31),
    "default_warranty_months": 24,
    "counted_statuses": ["approved"],
    "cost_window_months": 12,
    "safety_terms": ["fire", "smok"],
    "shipments_file": "/data/shipments.csv",
    "claims_file": "/data/claims.csv",
}
# DuckDB functions with no Spark function of the same meaning: none may survive the transpiling.
DUCKDB_ONLY = (
    "date_diff", "quantile_disc", "list_contains", "list_transform", "list_filter", "regexp_full_match",
    "try_strptime", "isfinite", "to_months", "strftime", "unnest", "string_split_regex", "columns(",
    "check_", "failed_check", "parse_build_month", "age_of_days", "age_through_day", "month_start_age",
    "month_end_age", "::", "$",
)


@pytest.fixture(scope="module")
def spark():
    from pyspark.sql import SparkSession

    # Settings for many tiny jobs (the tests' tables are a few hundred rows): the JVM's quick compiler only
    # (its optimising compiler spends the first minute compiling on the 2 cores the tests need), Spark's
    # interpreted expressions instead of generated code, one shuffle partition, no adaptive re-planning.
    # Measured on the hand-written rows (loaded 2-core machine): first shaping 57-62 s -> 35-37 s.
    # Production sessions keep Spark's defaults (`spark_engine.get_spark_session`).
    session = (
        SparkSession.builder.master("local[2]")
        .appName("warranty-forecast-tests")
        .config("spark.driver.extraJavaOptions", "-XX:TieredStopAtLevel=1")
        .config("spark.ui.enabled", "false")
        .config("spark.sql.shuffle.partitions", "1")
        .config("spark.sql.codegen.wholeStage", "false")
        .config("spark.sql.adaptive.enabled", "false")
        .config("spark.sql.session.timeZone", "UTC")
        .config("spark.sql.execution.arrow.pyspark.enabled", "true")
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()
    # py4j says goodbye at interpreter exit, after pytest has closed the streams its records would go to
    logging.getLogger("py4j").setLevel(logging.WARNING)


def planned_models():
    return [sql_runner.read_model(path) for layer in sql_runner.PLANNED_LAYERS for path in sql_runner.layer_models(layer)]


def test_every_model_transpiles_to_spark_without_duckdb_only_constructs():
    for model in planned_models():
        text = spark_engine.spark_sql(model.sql, {key: SAMPLE_PARAMETERS[key] for key in model.parameters})
        code = re.sub(r"/\*.*?\*/", "", text, flags=re.DOTALL)  # the header comments keep their words
        code = re.sub(r"'(?:[^'\\]|\\.)*'", "''", code)  # so do string literals
        left = [name for name in DUCKDB_ONLY if name in code.lower()]
        assert not left, f"{model.path}: {left} left in the Spark SQL"


def test_parameters_are_bound_as_literals_and_text_comes_back_unchanged(spark):
    # a value with a quote, a backslash and a comment marker is data, never SQL
    hostile = "o'k \\x -- ; drop table raw_claims"
    sql = spark_engine.spark_sql(
        "select $text as text, $day as day, list_contains($terms, 'b') as has_b, $count + 1 as next",
        {"text": hostile, "day": dt.date(2024, 2, 29), "terms": ["a", "b"], "count": 41},
    )
    row = spark.sql(sql).collect()[0]
    assert (row["text"], row["day"], row["has_b"], row["next"]) == (hostile, dt.date(2024, 2, 29), True, 42)


def test_the_traps_give_duckdbs_values_on_spark(spark):
    """date_diff's argument order and month counting, the lower median of dates, a date minus months at a
    month's end, ordered sums, JSON with nulls, list slices, division and the mean of decimals (doubles in
    DuckDB, rounded decimals in Spark): each compared with DuckDB itself, exactly."""
    sql = """
        with days as (
            select * from (values (date '2024-01-31', 1.0, 'a'), (date '2024-03-02', 0.1, 'b'),
                                  (date '2024-02-10', 0.2, 'c'), (date '2024-02-20', 1e16, 'd')) as t(day, x, k)
        )
        select
            date_diff('day', date '2024-01-31', date '2024-03-01') as days_forward,
            date_diff('day', date '2024-03-01', date '2024-01-31') as days_backward,
            date_diff('month', date '2024-01-31', date '2024-02-01') as months_crossed,
            (select quantile_disc(day, 0.5) from days) as lower_median,
            (date '2024-03-31' - to_months(1))::date as month_before,
            (select sum(x order by k) from days) as ordered_sum,
            to_json({'a': 1, 'b': null}) as json_text,
            array_to_string(['x', 'y', 'z'][2:], '') as tail,
            len(['x', 'y']) as length,
            regexp_full_match('2024-01', '\\d{4}-\\d{2}') as full_match,
            isfinite(1e308 * 10) as finite,
            1000 / (365.25 / 12) as months_of_days,
            (select avg(c) from (values (1.10::decimal(18, 2)), (2.21::decimal(18, 2)), (2.00::decimal(18, 2))) as t(c))
                as mean_cost
    """
    con = duckdb.connect()
    expected = con.execute(sql).fetchall()[0]
    got = tuple(spark.sql(spark_engine.spark_sql(sql, {})).collect()[0])
    assert got == expected, (got, expected)
    assert expected[:3] == (30, -30, 1)  # DuckDB's own answers, as its documentation defines date_diff


def assert_same_shaped_data(duck: ShapedData, spark_shaped: ShapedData) -> None:
    """Every field equal; tables frame-equal (values, dtypes, row order). Floats to 1e-12 relative: sums
    of fractional units (doubles) are added in an order each engine chooses per thread, so the last bit may
    differ; ordered sums and decimal costs are exact on both."""
    for field in dataclasses.fields(ShapedData):
        if field.name == "seconds_by_layer":
            continue
        ours, theirs = getattr(duck, field.name), getattr(spark_shaped, field.name)
        if isinstance(ours, pd.DataFrame):
            pd.testing.assert_frame_equal(ours, theirs, check_exact=False, rtol=1e-12, atol=0, obj=field.name)
        else:
            assert ours == theirs, field.name


def test_hand_written_rows_give_the_same_tables_on_both_engines(spark, tmp_path):
    shipments, claims = write_extracts(tmp_path, SHIPMENTS, CLAIMS)
    config = config_for(shipments, claims)
    duck = shape_extracts(config)
    on_spark = spark_engine.shape_extracts_on_spark(config, spark)
    assert_same_shaped_data(duck, on_spark)
    # the quarantine keeps its promise: every bad row with its file and 1-based row, counts reconciling
    assert len(on_spark.quarantine) == 19
    assert (on_spark.quarantine["source_file"].map(lambda f: f.endswith(("shipments.csv", "claims.csv")))).all()
    malformed = on_spark.quarantine[on_spark.quarantine["reason"] == "malformed_line"]
    assert list(malformed["row_number"]) == [8]
    recon = on_spark.reconciliation
    assert (recon["rows_read"] == recon["rows_used"] + recon["rows_quarantined"] + recon["rows_after_as_of"]).all()


def test_demo_data_gives_the_same_tables_on_both_engines(spark, tmp_path):
    config = load_config(shipments_path=DEMO_SHIPMENTS, claims_path=DEMO_CLAIMS, out_dir=tmp_path / "out")
    assert_same_shaped_data(shape_extracts(config), spark_engine.shape_extracts_on_spark(config, spark))


def test_the_engine_is_chosen_on_the_command_line_and_checked(tmp_path):
    from warranty_forecast.errors import ConfigError

    paths = dict(shipments_path=tmp_path / "s.csv", claims_path=tmp_path / "c.csv", out_dir=tmp_path / "out")
    assert load_config(**paths).engine == "duckdb"
    assert spark_engine.spark_master(load_config(**paths)) in (None, os.environ.get(spark_engine.SPARK_MASTER_ENV))
    config = load_config(**paths, engine="spark", spark_master="local[1]")
    assert (config.engine, spark_engine.spark_master(config)) == ("spark", "local[1]")
    with pytest.raises(ConfigError, match="--engine 'hive'"):
        load_config(**paths, engine="hive")
    # or in the configuration file's [run] table; the command line wins
    toml = tmp_path / "run.toml"
    toml.write_text('[run]\nengine = "spark"\nspark_master = "spark://lake-head:7077"\n')
    from_file = load_config(**paths, config_path=toml)
    assert (from_file.engine, spark_engine.spark_master(from_file)) == ("spark", "spark://lake-head:7077")
    overridden = load_config(**paths, config_path=toml, engine="duckdb", spark_master="local[1]")
    assert (overridden.engine, overridden.spark_master) == ("duckdb", "local[1]")
    toml.write_text('[run]\nengine = "hive"\n')
    with pytest.raises(ConfigError, match="engine"):
        load_config(**paths, config_path=toml)
    # a data-lake URL keeps its '//' although the command line passes paths through pathlib
    assert spark_engine.spark_path(Path("s3a://lake/extracts/claims.parquet")) == "s3a://lake/extracts/claims.parquet"
