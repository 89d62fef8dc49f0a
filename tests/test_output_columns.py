"""Published column names (outputs/output_columns.py, issue 12): forecast.parquet and
forecast_by_calendar_month.parquet publish the calendar month as `calendar_month` while the run's frames
keep `month`; run folders of older versions hold `month`, and the history database takes both.

The run folders here are small stand-in tables published with `run_folders.publish_run`, as in
tests/test_run_history.py; the expected values are the rows written (common practice, no source).
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import duckdb
import pandas as pd
import pytest

from warranty_forecast.outputs import history
from warranty_forecast.outputs.history import record_published_runs
from warranty_forecast.outputs.output_columns import (
    CALENDAR_MONTH,
    OUTPUT_RENAMES,
    as_current,
    current_names,
    for_output,
)
from warranty_forecast.outputs.run_folders import publish_run

SEP, OCT, NOV = dt.date(2026, 9, 30), dt.date(2026, 10, 31), dt.date(2026, 11, 30)
TABLE = "forecast_by_calendar_month"


def _by_calendar_month(month_name: str = "month") -> pd.DataFrame:
    return pd.DataFrame({
        "product": ["A", "A", "B"],
        month_name: [dt.date(2026, 12, 1), dt.date(2027, 1, 1), dt.date(2026, 12, 1)],
        "expected_returns": [1.5, 2.0, 0.25],
    })


# --- for_output / as_current ---------------------------------------------------------------------------


@pytest.mark.parametrize("table", ["forecast", "forecast_by_calendar_month"])
def test_for_output_renames_month_in_a_copy_keeping_order_and_values(table):
    internal = _by_calendar_month().assign(build_month=dt.date(2025, 1, 1))
    published = for_output(table, internal)
    assert list(published.columns) == ["product", CALENDAR_MONTH, "expected_returns", "build_month"]
    assert list(published[CALENDAR_MONTH]) == list(internal["month"])
    assert "month" in internal.columns and CALENDAR_MONTH not in internal.columns  # the run's frame untouched
    pd.testing.assert_frame_equal(as_current(table, internal), published)  # an old folder reads the same


def test_a_frame_already_renamed_or_without_month_or_of_another_table_passes_unchanged():
    current = _by_calendar_month(CALENDAR_MONTH)
    assert for_output("forecast", current) is current and as_current("forecast", current) is current
    without = _by_calendar_month().drop(columns=["month"])
    assert for_output(TABLE, without) is without
    other = _by_calendar_month()  # a table not renamed keeps its `month` (e.g. backtest_by_month)
    assert for_output("backtest_by_month", other) is other
    assert list(as_current("reserve", other).columns) == ["product", "month", "expected_returns"]


def test_both_names_in_one_frame_is_an_error_naming_them():
    both = _by_calendar_month().assign(calendar_month=dt.date(2026, 12, 1))
    with pytest.raises(ValueError, match="'month' and 'calendar_month'"):
        for_output(TABLE, both)
    with pytest.raises(ValueError, match="forecast_by_calendar_month"):
        as_current(TABLE, both)
    with pytest.raises(ValueError, match="frame must be a pandas DataFrame"):
        for_output(TABLE, {"month": [1]})  # type: ignore[arg-type]


def test_current_names_for_arrow_and_the_published_mapping():
    assert current_names(TABLE, ["run_id", "product", "month"]) == ["run_id", "product", CALENDAR_MONTH]
    assert current_names("reserve", ["month"]) == ["month"]
    assert dict(OUTPUT_RENAMES["forecast"]) == dict(OUTPUT_RENAMES[TABLE]) == {"month": CALENDAR_MONTH}
    with pytest.raises(TypeError):
        OUTPUT_RENAMES["forecast"]["month"] = "other"  # type: ignore[index]  # read-only


# --- the history database ------------------------------------------------------------------------------


def _document(run_id: str, as_of: dt.date) -> dict:
    return {"run_id": run_id, "as_of_date": as_of.isoformat(), "finished_utc": f"{as_of}T23:00:00+00:00"}


def _publish(root: Path, run_id: str, as_of: dt.date, month_name: str) -> pd.DataFrame:
    """A run folder whose forecast_by_calendar_month holds its month as `month_name` (a version before the
    rename: "month"), stamped as run.stamped does (run_id, as_of_date first)."""
    frame = _by_calendar_month(month_name)
    frame.insert(0, "as_of_date", as_of)
    frame.insert(0, "run_id", run_id)
    publish_run(root, run_id, {TABLE: frame}, {}, {}, _document(run_id, as_of))
    return frame


def _stored(root: Path) -> tuple[list[str], list[tuple]]:
    with duckdb.connect(str(root / "history.duckdb"), read_only=True) as con:
        columns = [row[0] for row in con.execute(f"describe {TABLE}").fetchall()]
        rows = con.execute(
            f"select run_id, product, {CALENDAR_MONTH}, expected_returns from {TABLE} order by all"
        ).fetchall()
    return columns, rows


def _expected_rows(*run_ids: str) -> list[tuple]:
    frame = _by_calendar_month()
    return sorted((run_id, *row) for run_id in run_ids for row in frame.itertuples(index=False))


def _as_before_the_rename(monkeypatch: pytest.MonkeyPatch) -> None:
    """The history module as it was before the rename: no column renamed on reading or in the database."""
    monkeypatch.setattr(history, "OUTPUT_RENAMES", {})
    monkeypatch.setattr(history, "current_names", lambda table, names: list(names))


def test_an_old_database_is_renamed_once_and_keeps_its_rows(tmp_path, monkeypatch):
    root = tmp_path / "out"
    old, new = "2026-10-31-aaaaaaaaaaaa", "2026-11-30-bbbbbbbbbbbb"
    _publish(root, old, OCT, "month")
    with monkeypatch.context() as patch:
        _as_before_the_rename(patch)
        assert record_published_runs(root).recorded == (old,)
    with duckdb.connect(str(root / "history.duckdb"), read_only=True) as con:  # the database an old version made
        assert "month" in [row[0] for row in con.execute(f"describe {TABLE}").fetchall()]
    _publish(root, new, NOV, CALENDAR_MONTH)
    update = record_published_runs(root)
    assert update.error is None and update.recorded == (new,)
    columns, rows = _stored(root)
    assert "month" not in columns and columns.count(CALENDAR_MONTH) == 1
    assert rows == _expected_rows(old, new)  # the old run's months kept, under the new name
    assert record_published_runs(root).recorded == ()  # nothing twice


def test_an_old_run_folder_recorded_into_a_new_database_gets_calendar_month(tmp_path):
    root = tmp_path / "out"
    old, new = "2026-10-31-aaaaaaaaaaaa", "2026-11-30-bbbbbbbbbbbb"
    _publish(root, old, OCT, "month")  # published by an older version, recorded only now
    _publish(root, new, NOV, CALENDAR_MONTH)
    assert record_published_runs(root).recorded == (old, new)
    columns, rows = _stored(root)
    assert columns == ["run_id", "as_of_date", "product", CALENDAR_MONTH, "expected_returns"]
    assert rows == _expected_rows(old, new)


def test_a_database_holding_both_names_is_merged_into_calendar_month(tmp_path, monkeypatch):
    # an older version recorded a renamed folder after a newer one (a rollback): `month` filled for its
    # run, `calendar_month` for the other, each NULL where the other is set
    root = tmp_path / "out"
    ids = ("2026-09-30-aaaaaaaaaaaa", "2026-10-31-bbbbbbbbbbbb", "2026-11-30-cccccccccccc")
    _publish(root, ids[0], SEP, "month")
    _publish(root, ids[1], OCT, CALENDAR_MONTH)
    with monkeypatch.context() as patch:
        _as_before_the_rename(patch)
        assert record_published_runs(root).recorded == ids[:2]
    with duckdb.connect(str(root / "history.duckdb"), read_only=True) as con:
        assert {"month", CALENDAR_MONTH} <= {row[0] for row in con.execute(f"describe {TABLE}").fetchall()}
    _publish(root, ids[2], NOV, "month")
    assert record_published_runs(root).recorded == ids[2:]
    columns, rows = _stored(root)
    assert "month" not in columns and columns.count(CALENDAR_MONTH) == 1
    assert rows == _expected_rows(*ids)


def test_a_run_folder_holding_both_names_is_not_recorded(tmp_path):
    root = tmp_path / "out"
    run_id = "2026-11-30-bbbbbbbbbbbb"
    frame = _by_calendar_month().assign(calendar_month=dt.date(2026, 12, 1))
    frame.insert(0, "run_id", run_id)
    publish_run(root, run_id, {TABLE: frame}, {}, {}, _document(run_id, NOV))
    update = record_published_runs(root)  # returned, not raised: the run that records it has published
    assert update.recorded == () and "holds both 'month' and 'calendar_month'" in update.error
    with duckdb.connect(str(root / "history.duckdb"), read_only=True) as con:
        assert con.execute("select count(*) from runs").fetchone()[0] == 0  # its transaction rolled back
