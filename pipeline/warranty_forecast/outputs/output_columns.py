"""Published column names that differ from the names the stages use inside the run.

Why: `forecast.parquet` and `forecast_by_calendar_month.parquet` hold the calendar month in which an
expected return or claim falls (its first day) beside `build_month`, and a column called plain `month` did
not say which month it was. The published tables call it `calendar_month`; the frames inside the run (the
stages, the charts drawn from them) keep `month`, so the rename happens once, on the way out (`for_output`,
called where run.py publishes its tables). Run folders written before the rename still hold `month`: every
reader of published tables takes them through `as_current` (or `current_names` for an Arrow table, as the
history database does), which gives the current names whichever version wrote the file.

    OUTPUT_RENAMES   table name (the file's stem) -> {name inside the run: published name}
    for_output       a frame as it is published (internal names -> published names)
    as_current       a published frame read back, from any version (older published names -> current ones)
    current_names    the same for a list of column names (Arrow tables, schemas)

A table not in OUTPUT_RENAMES passes unchanged. A frame that holds both the old and the new name of one
column is ambiguous (which is the month?): ValueError.
"""

from __future__ import annotations

from types import MappingProxyType
from typing import Iterable, Mapping

import pandas as pd

CALENDAR_MONTH = "calendar_month"

OUTPUT_RENAMES: Mapping[str, Mapping[str, str]] = MappingProxyType({
    "forecast": MappingProxyType({"month": CALENDAR_MONTH}),
    "forecast_by_calendar_month": MappingProxyType({"month": CALENDAR_MONTH}),
    "reserve_by_calendar_month": MappingProxyType({"month": CALENDAR_MONTH}),  # published so from the first
})


def current_names(table_name: str, names: Iterable[str]) -> list[str]:
    """`names` (a table's columns, in order) with each older published name of `table_name` replaced by its
    current one; names already current, and tables without renames, unchanged. ValueError when a column
    is there under both names."""
    names = list(names)
    renames = OUTPUT_RENAMES.get(table_name, {})
    present = set(names)
    for old, new in renames.items():
        if old in present and new in present:
            raise ValueError(
                f"table {table_name!r} holds both {old!r} and {new!r} (the same column under its old and new"
                f" name): cannot tell which to keep"
            )
    return [renames.get(name, name) for name in names]


def for_output(table_name: str, frame: pd.DataFrame) -> pd.DataFrame:
    """The frame as published under `table_name`: a renamed copy (internal name -> published name, e.g.
    forecast's `month` -> `calendar_month`). A frame already under the published names, or without the
    renamed columns, or of a table without renames, is returned as it is (not copied). ValueError when a
    column is there under both names."""
    return _renamed(table_name, frame)


def as_current(table_name: str, frame: pd.DataFrame) -> pd.DataFrame:
    """A published frame read back from a run folder of any version, under today's published names: an
    older run's `month` in forecast / forecast_by_calendar_month becomes `calendar_month`. Unchanged (not
    copied) when there is nothing to rename. ValueError when a column is there under both names."""
    return _renamed(table_name, frame)


def _renamed(table_name: str, frame: pd.DataFrame) -> pd.DataFrame:
    # the internal names are the older published names, so publishing and reading back are one mapping
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(f"frame must be a pandas DataFrame, got {type(frame).__name__}")
    names = list(frame.columns)
    mapping = {old: new for old, new in zip(names, current_names(table_name, names)) if old != new}
    return frame.rename(columns=mapping) if mapping else frame
