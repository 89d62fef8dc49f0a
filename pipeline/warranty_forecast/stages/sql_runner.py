"""The runner of the SQL models in `sql/`: reads each model and its header, orders the models by what
they read, materialises each as a table named after its file, and reads the final tables back.

A model is one SELECT in `sql/<layer>/<name>.sql`. Its header comment declares, one field a line (a field
goes on over the following lines that start with `--` and three spaces):

    -- Parameters: $as_of_date, $cost_window_months      (or: none)
    -- Reads: claims_assigned_to_sale_month_groups       (the tables it selects from)
    -- Sort: product                                     (outputs only: the order Python reads it in)

`plan_models` checks each header against the text (the tables DuckDB's parser finds, the `$names` used)
and against the layers (an output reads only staging and intermediate tables), then sorts the models
topologically by their `Reads:`: that is the run order; nothing else lists the models. The columns Python
gets are the output's final select list, as DuckDB reports them after the run.

The raw layer (per extract, with table names as parameters) and the macros are run by their callers
through `run_model` / `run_statements`; they are not part of the plan.
"""

from __future__ import annotations

import graphlib
import re
import time
from dataclasses import dataclass
from importlib import resources
from typing import Any, Iterable, Mapping, MutableMapping

import duckdb
import pandas as pd

# The SQL models ship inside the package (`warranty_forecast.sql`, mapped from the top-level sql/ folder
# that people edit); an editable install reads that folder itself.
SQL_PACKAGE = "warranty_forecast.sql"

MACRO_FILES: tuple[str, ...] = ("macros/validation", "macros/ages")  # statements, run before any model
PLANNED_LAYERS: tuple[str, ...] = ("staging", "intermediate", "outputs")
# What a model of each layer may read ("raw" stands for the tables the extract loader wrote).
_MAY_READ: dict[str, tuple[str, ...]] = {
    "staging": ("raw",),
    "intermediate": ("raw", "staging", "intermediate"),
    "outputs": ("staging", "intermediate"),
}
_PARAMETER = re.compile(r"\$([A-Za-z_][A-Za-z0-9_]*)")
_FIELD = re.compile(r"^-- ([A-Z][a-z]+): ?(.*)$")
_CONTINUATION = re.compile(r"^--   +(.*)$")


@dataclass(frozen=True)
class Model:
    """One SQL model of the plan: its file (``"<layer>/<name>"``), text and header fields."""

    path: str
    sql: str
    reads: tuple[str, ...]
    sort: tuple[str, ...]
    declared_parameters: frozenset[str]

    @property
    def layer(self) -> str:
        return self.path.split("/", 1)[0]

    @property
    def name(self) -> str:
        return self.path.rsplit("/", 1)[-1]

    @property
    def parameters(self) -> frozenset[str]:
        """The `$names` the model's text uses (comments left out)."""
        return frozenset(_PARAMETER.findall(_without_comments(self.sql)))


def read_model_sql(model: str) -> str:
    """The text of one SQL model, e.g. ``read_model_sql("staging/stg_claims")``."""
    return resources.files(SQL_PACKAGE).joinpath(f"{model}.sql").read_text(encoding="utf-8")


def header_fields(sql: str) -> dict[str, str]:
    """The `-- Field: text` lines of a model's opening comment, continuation lines joined with a space."""
    fields: dict[str, str] = {}
    field = None
    for line in sql.splitlines():
        if not line.startswith("--"):
            break
        continued = _CONTINUATION.match(line)
        started = _FIELD.match(line)
        if continued and field is not None:
            fields[field] = f"{fields[field]} {continued.group(1).strip()}"
        elif started:
            field = started.group(1)
            fields[field] = started.group(2).strip()
        else:
            field = None
    return fields


def _names(field: str) -> tuple[str, ...]:
    """`a, b, c.` -> (a, b, c); `none` or an empty field -> ()."""
    text = field.strip().rstrip(".")
    if text in ("", "none", "nothing"):
        return ()
    return tuple(name.strip() for name in text.split(","))


def read_model(path: str) -> Model:
    """One model with the fields of its header (`Reads:` is required, `Sort:` is optional)."""
    sql = read_model_sql(path)
    fields = header_fields(sql)
    if "Reads" not in fields or "Parameters" not in fields:
        raise ValueError(f"SQL model {path}: the header needs a '-- Parameters:' and a '-- Reads:' line")
    return Model(
        path=path,
        sql=sql,
        reads=_names(fields["Reads"]),
        sort=_names(fields.get("Sort", "")),
        declared_parameters=frozenset(_PARAMETER.findall(fields["Parameters"])),
    )


def layer_models(layer: str) -> tuple[str, ...]:
    """The models of one layer folder, by file name: ``("outputs/age_in_service", ...)``."""
    folder = resources.files(SQL_PACKAGE).joinpath(layer)
    return tuple(sorted(f"{layer}/{item.name[:-4]}" for item in folder.iterdir() if item.name.endswith(".sql")))


def tables_read(con: duckdb.DuckDBPyConnection, sql: str) -> frozenset[str]:
    """The tables a query selects from, as DuckDB's parser finds them (CTE names and functions left out)."""
    parsable = _PARAMETER.sub("NULL", _without_comments(sql))
    return frozenset(con.get_table_names(parsable))


def plan_models(con: duckdb.DuckDBPyConnection, sources: Iterable[str]) -> tuple[Model, ...]:
    """Every model of the planned layers, in an order where each runs after the tables it reads.

    `sources` are the tables the extract loader wrote (`raw_*`). Raises ValueError when a header names a
    table the text does not read (or leaves one out), a parameter it does not use, a table that is neither
    a model nor a source, a table of a layer it may not read; when an output has no `Sort:`; or when the
    models read each other in a circle.
    """
    models = {model.name: model for layer in PLANNED_LAYERS for model in map(read_model, layer_models(layer))}
    layer_of = {**{source: "raw" for source in sources}, **{name: model.layer for name, model in models.items()}}
    problems = []
    for model in models.values():
        if set(model.reads) != tables_read(con, model.sql):
            problems.append(f"{model.path} reads {sorted(tables_read(con, model.sql))}, its header says {list(model.reads)}")
        if model.declared_parameters != model.parameters:
            problems.append(
                f"{model.path} uses {sorted(model.parameters)}, its header says {sorted(model.declared_parameters)}"
            )
        for table in model.reads:
            if table not in layer_of:
                problems.append(f"{model.path} reads {table}, which is neither a model nor an extract table")
            elif layer_of[table] not in _MAY_READ[model.layer]:
                problems.append(f"{model.path} ({model.layer}) may not read {table} ({layer_of[table]})")
        if model.layer == "outputs" and not model.sort:
            problems.append(f"{model.path} has no '-- Sort:' line")
    if problems:
        raise ValueError("SQL model headers: " + "; ".join(problems))
    sorter = graphlib.TopologicalSorter(
        {name: [table for table in model.reads if table in models] for name, model in models.items()}
    )
    try:
        sorter.prepare()
    except graphlib.CycleError as error:
        raise ValueError(f"SQL models read each other in a circle: {error.args[1]}") from None
    order: list[Model] = []
    while sorter.is_active():  # among the models ready together: earlier layer first, then by name
        ready = sorted(sorter.get_ready(), key=lambda name: (PLANNED_LAYERS.index(models[name].layer), name))
        order.extend(models[name] for name in ready)
        sorter.done(*ready)
    return tuple(order)


def upstream_of(plan: tuple[Model, ...], name: str) -> tuple[Model, ...]:
    """The models `name` needs (itself included), in the plan's order."""
    by_name = {model.name: model for model in plan}
    needed: set[str] = set()
    pending = [name]
    while pending:
        current = pending.pop()
        if current in by_name and current not in needed:
            needed.add(current)
            pending.extend(by_name[current].reads)
    return tuple(model for model in plan if model.name in needed)


def run_model(
    con: duckdb.DuckDBPyConnection, model: str, parameters: Mapping[str, Any], table: str | None = None
) -> None:
    """Materialise one SQL model as a table named after its file, binding only the parameters it uses."""
    sql = read_model_sql(model)
    used = set(_PARAMETER.findall(_without_comments(sql)))
    missing = used - set(parameters)
    if missing:
        raise KeyError(f"SQL model {model} needs parameters {sorted(missing)}")
    name = table or model.rsplit("/", 1)[-1]
    con.execute(f"create or replace table {name} as {sql}", {key: parameters[key] for key in used})


def run_statements(con: duckdb.DuckDBPyConnection, path: str) -> None:
    """Run a file of statements (the macros) as it is."""
    con.execute(read_model_sql(path))


def tables_done_after(plan: Iterable[Model], keep: Iterable[str]) -> dict[str, tuple[str, ...]]:
    """For each model of the plan, the tables no model after it reads (its `Reads:` the last use of them),
    leaving out the tables in `keep` (the outputs, which are read back at the end). Dropping them as soon as
    they are done keeps DuckDB's memory to the tables still needed: at 10 M unit rows every wide
    intermediate table is a few hundred MB."""
    plan = tuple(plan)
    kept = set(keep)
    last_reader: dict[str, str] = {}
    for model in plan:
        for table in model.reads:
            last_reader[table] = model.name
    done: dict[str, list[str]] = {model.name: [] for model in plan}
    for table, reader in last_reader.items():
        if table not in kept:
            done[reader].append(table)
    return {name: tuple(sorted(tables)) for name, tables in done.items()}


def run_models(
    con: duckdb.DuckDBPyConnection,
    models: Iterable[Model],
    parameters: Mapping[str, Any],
    seconds_by_layer: MutableMapping[str, float],
    drop_after: Mapping[str, Iterable[str]] | None = None,
) -> None:
    """Run models in the order given, adding each one's time to its layer's; after each, drop the tables
    `drop_after[model name]` lists (see `tables_done_after`)."""
    for model in models:
        started = time.perf_counter()
        run_model(con, model.path, parameters)
        for table in (drop_after or {}).get(model.name, ()):
            con.execute(f'drop table if exists "{table}"')  # names from the plan's headers, checked identifiers
        seconds_by_layer[model.layer] = seconds_by_layer.get(model.layer, 0.0) + time.perf_counter() - started


def read_table(con: duckdb.DuckDBPyConnection, model: Model) -> pd.DataFrame:
    """A model's table as a DataFrame: its columns as its final select lists them, rows in its `Sort:`
    order, dates as `datetime.date`."""
    relation = con.table(model.name)
    if model.sort:
        relation = relation.order(", ".join(f'"{column}"' for column in model.sort))
    frame = relation.df()
    for column in frame.columns:
        if pd.api.types.is_datetime64_any_dtype(frame[column]):
            frame[column] = frame[column].dt.date
    return frame


def read_row(con: duckdb.DuckDBPyConnection, table: str) -> dict[str, Any]:
    """The one row of a one-row table, by column name (values as DuckDB gives them: dates as `date`)."""
    relation = con.table(table)
    rows = relation.fetchall()
    if len(rows) != 1:
        raise ValueError(f"table {table} holds {len(rows)} rows, not one")
    return dict(zip(relation.columns, rows[0]))


def _without_comments(sql: str) -> str:
    return "\n".join(line.split("--", 1)[0] for line in sql.splitlines())
