"""The history database: every published run's decision tables in one DuckDB file, `<root>/history.duckdb`,
for finance and engineers to query with plain SQL.

Tables (each row keyed by run_id and as_of_date, as published):
    runs                      one row per published run: as-of date, when it was published, its folder,
                              the version, the reserve total and currency, and for a rerun of a closed
                              as-of date the run it superseded (rerun_of) and why (reason)
    runs_in_effect (view)     the newest run of each as-of date
    reserve_by_product, reserve, roll_forward, forecast_by_calendar_month, forecast_intervals,
    life_model, build_month_alerts          the run's tables of the same names

The database is an index over the run folders, which are the record: runs are only ever inserted (never
updated or deleted), each in one transaction with its tables, and a run folder not yet in the database
(a run stopped after publishing, or a database held open by a reader at the time) is recorded by the next
run. A table that gains a column in a later version gains it here too (older runs read NULL there).

A published column that was renamed (`output_columns.OUTPUT_RENAMES`: forecast_by_calendar_month's
`month`, now `calendar_month`) is stored under its current name only: a run folder written before the
rename has its table renamed as it is read (`output_columns.current_names`), and a database made before it
has the column renamed once (`alter table ... rename column`, its rows keep their values) in the
transaction of the first run recorded after. A database that holds both names (an older version recorded
runs after a newer one had renamed the column) has them merged there: the old name's values filled into
the rows whose current-name value is NULL, the old column dropped.
"""

from __future__ import annotations

import datetime as dt
import logging
from dataclasses import dataclass
from pathlib import Path

import duckdb
import pyarrow.parquet as pq

from warranty_forecast.outputs.output_columns import OUTPUT_RENAMES, current_names
from warranty_forecast.outputs.run_folders import HISTORY_FILE, PublishedRun, published_runs

log = logging.getLogger(__name__)

HISTORY_TABLES = (
    "reserve_by_product",
    "reserve",
    "roll_forward",
    "forecast_by_calendar_month",
    "reserve_by_calendar_month",
    "forecast_intervals",
    "life_model",
    "build_month_alerts",
)

_RUNS_TABLE = """
create table if not exists runs (
    run_id varchar primary key,
    as_of_date date not null,
    finished_utc timestamptz,
    recorded_utc timestamptz not null,
    folder varchar not null,
    version varchar,
    rerun_of varchar,
    reason varchar,
    currency varchar,
    reserve_total double,
    shipments_sha256 varchar,
    claims_sha256 varchar
)
"""

_RUNS_IN_EFFECT = """
create or replace view runs_in_effect as
select * from runs
qualify row_number() over (partition by as_of_date order by finished_utc desc, run_id desc) = 1
"""


@dataclass(frozen=True)
class HistoryUpdate:
    """What recording did: the run ids recorded now, and the error that stopped it (None when it finished)."""

    path: Path
    recorded: tuple[str, ...]
    error: str | None


def history_path(root: Path) -> Path:
    return Path(root) / HISTORY_FILE


def record_published_runs(root: Path) -> HistoryUpdate:
    """Record every published run under `root` that the history database does not hold yet, oldest first,
    each in one transaction. Never raises for a database it cannot open or write (held by a reader, full
    disk) or a table it cannot take (a renamed column under both names): the error is returned and the
    runs are recorded by a later run."""
    path = history_path(root)
    recorded: list[str] = []
    try:
        con = duckdb.connect(str(path))
    except duckdb.Error as error:
        return HistoryUpdate(path, (), _one_line(error))
    try:
        con.execute(_RUNS_TABLE)
        con.execute(_RUNS_IN_EFFECT)
        known = {row[0] for row in con.execute("select run_id from runs").fetchall()}
        for run in published_runs(root):
            if run.run_id in known:
                continue
            _record(con, run)
            recorded.append(run.run_id)
            known.add(run.run_id)
        con.execute("checkpoint")
    except (duckdb.Error, OSError, ValueError) as error:  # ValueError: a table holding a column under two names
        return HistoryUpdate(path, tuple(recorded), _one_line(error))
    finally:
        con.close()
    return HistoryUpdate(path, tuple(recorded), None)


def _record(con: duckdb.DuckDBPyConnection, run: PublishedRun) -> None:
    con.execute("begin transaction")
    try:
        total, currency = None, None
        for table in HISTORY_TABLES:
            path = run.folder / f"{table}.parquet"
            if not path.is_file():
                continue
            arrow = pq.read_table(path)
            if "run_id" not in arrow.column_names:
                continue  # a table of a version before run ids: kept in its folder only
            names = current_names(table, arrow.column_names)  # a folder of a version before a rename
            if names != arrow.column_names:
                arrow = arrow.rename_columns(names)
            con.register("incoming_table", arrow)
            _append(con, table)
            if table == "reserve_by_product" and arrow.num_rows:
                frame = arrow.to_pandas()
                total = float(frame["reserve"].sum()) if "reserve" in frame else None
                currencies = sorted(set(frame["currency"].dropna())) if "currency" in frame else []
                currency = currencies[0] if len(currencies) == 1 else None
        con.execute(
            "insert into runs values (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            [
                run.run_id, run.as_of_date, _timestamp(run.finished_utc), dt.datetime.now(dt.timezone.utc),
                f"runs/{run.folder.name}", run.version, run.rerun_of, run.reason, currency, total,
                run.inputs.get("shipments"), run.inputs.get("claims"),
            ],
        )
        con.execute("commit")
    except BaseException:
        con.execute("rollback")
        raise
    finally:
        try:
            con.unregister("incoming_table")
        except duckdb.Error:
            pass


def _append(con: duckdb.DuckDBPyConnection, table: str) -> None:
    """Append the registered `incoming_table` to `table` by column name, creating it or adding new columns."""
    exists = con.execute(
        "select count(*) from information_schema.tables where table_name = ? and table_schema = 'main'", [table]
    ).fetchone()[0]
    quoted = _quoted(table)
    if not exists:
        con.execute(f"create table {quoted} as select * from incoming_table")
        return
    _rename_old_columns(con, table)
    have = {row[0]: row[1] for row in con.execute(f"describe {quoted}").fetchall()}
    for name, column_type, *_ in con.execute("describe incoming_table").fetchall():
        if name not in have:
            con.execute(f"alter table {quoted} add column {_quoted(name)} {column_type}")
        elif have[name] == '"NULL"' and column_type != '"NULL"':  # typed at last (an empty table came first)
            con.execute(f"alter table {quoted} alter column {_quoted(name)} type {column_type}")
    con.execute(f"insert into {quoted} by name select * from incoming_table")


def _rename_old_columns(con: duckdb.DuckDBPyConnection, table: str) -> None:
    """Bring `table` (which exists) to the current published names of its columns, in the caller's
    transaction: an old name alone is renamed (rows keep their values); an old name beside the current one
    is merged into it (where the current one is NULL) and dropped. Nothing to do: no statement runs."""
    renames = OUTPUT_RENAMES.get(table, {})
    if not renames:
        return
    quoted = _quoted(table)
    have = {row[0] for row in con.execute(f"describe {quoted}").fetchall()}
    for old, new in renames.items():
        if old not in have:
            continue
        if new not in have:
            con.execute(f"alter table {quoted} rename column {_quoted(old)} to {_quoted(new)}")
            log.info("history: %s.%s renamed to %s", table, old, new)
            continue
        con.execute(f"update {quoted} set {_quoted(new)} = {_quoted(old)} where {_quoted(new)} is null")
        con.execute(f"alter table {quoted} drop column {_quoted(old)}")
        log.info("history: %s.%s merged into %s and dropped", table, old, new)


def _quoted(identifier: str) -> str:
    return '"' + identifier.replace('"', '""') + '"'


def _timestamp(text: str) -> dt.datetime | None:
    try:
        moment = dt.datetime.fromisoformat(text)
    except (TypeError, ValueError):
        return None
    return moment if moment.tzinfo else moment.replace(tzinfo=dt.timezone.utc)


def _one_line(error: BaseException) -> str:
    return " ".join(str(error).split())
