"""The shaping stage on Spark SQL: the same `sql/` models, transpiled from DuckDB's dialect at run time.

The models in `sql/` are DuckDB SQL and stay the one source of truth. For Spark each planned model goes
through three steps (`spark_sql`), all on sqlglot's syntax tree, never on the text:

1. `expand_macros`: every call of a macro of `sql/macros/` is replaced by the macro's body (parsed from
   the same files DuckDB runs), its arguments put in place of its parameters, until none is left.
2. `bind_parameters`: every `$name` becomes a literal built as a sqlglot expression (a date as
   ``CAST('2024-12-31' AS DATE)``, a list as ``ARRAY(...)``, text quoted by the generator), so that no
   value is ever pasted into SQL text.
3. `to_spark`: the few constructs whose meaning differs between the engines are rewritten (the Spark
   side of the engine-specific pieces, all in `_SPARK_REWRITES`), then sqlglot writes Spark SQL.

The traps handled there (each one a function below):
  date_diff('day', a, b)     -> datediff(b, a)             (Spark's two-argument form is end, start)
  date_diff('month', a, b)   -> month boundaries crossed    (Spark's timestampdiff counts whole months)
  quantile_disc(x, 0.5)      -> percentile_disc within group (on the date's day number: lower median)
  a / b                      -> cast(a as double) / b     (Spark divides decimals as decimals, rounded)
  avg(decimal)               -> the exact sum as a double over the count (Spark's avg is a rounded decimal)
  sum(x order by a, b)       -> a left fold over the sorted (a, b, x) structs (the same order of float
                                additions as DuckDB's ordered aggregate, so the same bits)
  to_json(struct)            -> to_json keeping null fields (Spark drops them by default)
  list[i:]                   -> slice(list, i, ...)        (1-based in both)
  len(list)                  -> size(list)
  date - to_months(n)        -> add_months(date, -n)       (both clip to the month's last day)
  isfinite(x)                -> not NaN and not infinite
  regexp_full_match(t, p)    -> t rlike '^(?:p)$'
  try_strptime(t, '%Y-%m')   -> to_date(try_to_timestamp(t, 'yyyy-MM'))
  try_cast(t as date)        -> only text DuckDB would take as a date (Spark also takes '2024' and '2024-01')
sqlglot itself handles struct literals and fields, list_contains, lambdas, FILTER (WHERE ...), try_cast,
strftime, ``::`` casts and range.

The raw layer (`sql/raw/`) reads files with DuckDB's own functions; on Spark `load_extract_on_spark`
reads the extract into temp views of the same names and columns (`raw_<name>`: every contract column as
text with its 1-based `source_row_number`; `raw_<name>_malformed`): a CSV as text lines numbered in file
order (per-partition counts and offsets, no Python on the executors), each split with Spark's CSV parser;
a Parquet file with its per-file row index (`_metadata.row_index`).

`shape_extracts_on_spark(config)` runs the plan of `sql_runner.plan_models` on a SparkSession, each model
materialised (`localCheckpoint`) as a temp view named after its file, and returns only the output tables
to Python, sorted by their `Sort:` headers, with DuckDB's pandas types; the checks and the as-of date are
`shaping`'s own functions. pyspark and sqlglot are imported here only (an optional extra: `.[spark]`).
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import logging
import math
import os
import re
import time
from functools import lru_cache
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping

import pandas as pd

from warranty_forecast.config import RunConfig
from warranty_forecast.errors import ContractError, InputUnreadableError
from warranty_forecast.stages.extracts import (
    CLAIMS,
    SHIPMENTS,
    ExtractContract,
    check_header,
    raw_tables,
)
from warranty_forecast.stages.shaping import (
    NEWEST_DATES_MODEL,
    ShapedData,
    as_of_parameters,
    choose_as_of,
    model_plan,
    run_parameters,
    shaped_data,
)
from warranty_forecast.stages.sql_runner import (
    MACRO_FILES,
    Model,
    read_model_sql,
    upstream_of,
)

if TYPE_CHECKING:  # pragma: no cover
    from pyspark.sql import DataFrame, SparkSession
    from sqlglot import exp

log = logging.getLogger(__name__)

DEFAULT_MASTER = "local[2]"
SPARK_MASTER_ENV = "WARRANTY_FORECAST_SPARK_MASTER"  # overrides [spark] master (e.g. a cluster's URL)
SPARK_REMOTE_ENV = "SPARK_REMOTE"  # a Spark Connect address (sc://host:15002): pyspark's own variable


def _sqlglot():
    try:
        import sqlglot
        from sqlglot import exp
    except ImportError as error:  # pragma: no cover - the extra is missing
        raise ImportError(
            "the Spark engine needs the optional extra: pip install 'warranty-forecast[spark]'"
            " (pyspark>=4.0, sqlglot>=25)"
        ) from error
    return sqlglot, exp


# ------------------------------------------------------------------------------------------ macros

_MACRO = re.compile(
    r"create\s+or\s+replace\s+macro\s+(\w+)\s*\(([^)]*)\)\s+as\s+(.*?);", re.IGNORECASE | re.DOTALL
)


@lru_cache(maxsize=1)
def macro_definitions() -> dict[str, tuple[tuple[str, ...], Any]]:
    """name -> (parameter names, body as a sqlglot expression), from the files DuckDB runs (MACRO_FILES)."""
    sqlglot, _ = _sqlglot()
    macros = {}
    for path in MACRO_FILES:
        text = "\n".join(line.split("--", 1)[0] for line in read_model_sql(path).splitlines())
        for name, parameters, body in _MACRO.findall(text):
            names = tuple(p.strip() for p in parameters.split(",") if p.strip())
            macros[name.lower()] = (names, sqlglot.parse_one(body, read="duckdb"))
    if not macros:
        raise ValueError(f"no macro found in {MACRO_FILES}")
    return macros


def expand_macros(tree: "exp.Expression") -> "exp.Expression":
    """The query with every macro call replaced by the macro's body (arguments in place of parameters)."""
    _, exp = _sqlglot()
    macros = macro_definitions()

    expanded = []

    def expand(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.Anonymous) and str(node.this).lower() in macros:
            expanded.append(node.name)
            names, body = macros[str(node.this).lower()]
            arguments = node.expressions
            if len(arguments) != len(names):
                raise ValueError(f"macro {node.this} takes {len(names)} arguments, {len(arguments)} given")
            by_name = dict(zip(names, arguments))

            def substitute(inner: exp.Expression) -> exp.Expression:
                if isinstance(inner, exp.Column) and not inner.table and inner.name in by_name:
                    return exp.Paren(this=by_name[inner.name].copy())
                return inner

            return body.copy().transform(substitute)
        return node

    for _ in range(20):  # macros call macros: expand until none is left
        expanded.clear()
        tree = tree.transform(expand)
        if not expanded:
            return tree
    raise ValueError("macros call each other too deeply (a circle?)")


# -------------------------------------------------------------------------------------- parameters


def literal(value: Any) -> "exp.Expression":
    """A Python value as a sqlglot literal expression (the generator quotes text for the target dialect)."""
    _, exp = _sqlglot()
    if value is None:
        return exp.Null()
    if isinstance(value, bool):
        return exp.Boolean(this=value)
    if isinstance(value, dt.datetime):
        raise TypeError(f"parameter value {value!r}: a datetime is not a model parameter (use a date)")
    if isinstance(value, dt.date):
        return exp.cast(exp.Literal.string(value.isoformat()), "date")
    if isinstance(value, int):
        return exp.Literal.number(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"parameter value {value!r} is not finite")
        return exp.Literal.number(repr(value))
    if isinstance(value, str):
        return exp.Literal.string(value)
    if isinstance(value, (list, tuple)):
        if not all(isinstance(item, str) for item in value):
            raise TypeError(f"parameter value {value!r}: only lists of text are model parameters")
        return exp.cast(exp.Array(expressions=[literal(item) for item in value]), "array<string>")
    raise TypeError(f"parameter value {value!r} of type {type(value).__name__} has no SQL literal")


def bind_parameters(tree: "exp.Expression", parameters: Mapping[str, Any]) -> "exp.Expression":
    """Every `$name` replaced by its value as a literal expression; KeyError naming the missing ones."""
    _, exp = _sqlglot()
    used = {node.name for node in tree.find_all(exp.Placeholder)}
    missing = used - set(parameters)
    if missing:
        raise KeyError(f"SQL parameters {sorted(missing)} have no value")

    def bind(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.Placeholder):
            return literal(parameters[node.name])
        return node

    return tree.transform(bind)


# ------------------------------------------------------------------- the Spark side of the dialects


def _is_unit(node: Any, unit: str) -> bool:
    return node is not None and node.name.lower().strip("'") == unit


def _rewrite_date_diff(node):
    _, exp = _sqlglot()
    if isinstance(node, exp.DateDiff):
        unit = node.args.get("unit")
        start, end = node.expression, node.this  # sqlglot: this = end, expression = start
        if unit is None or _is_unit(unit, "day"):
            return exp.cast(exp.Anonymous(this="datediff", expressions=[end.copy(), start.copy()]), "bigint")
        if _is_unit(unit, "month"):  # DuckDB counts month boundaries crossed, not whole months elapsed
            return exp.cast(exp.paren(
                exp.Sub(
                    this=exp.Add(
                        this=exp.Mul(
                            this=exp.paren(exp.Sub(this=exp.Year(this=end.copy()), expression=exp.Year(this=start.copy()))),
                            expression=exp.Literal.number(12),
                        ),
                        expression=exp.Month(this=end.copy()),
                    ),
                    expression=exp.Month(this=start.copy()),
                )
            ), "bigint")  # DuckDB's date_diff is a BIGINT
        raise ValueError(f"date_diff unit {unit.sql()} has no Spark rewrite")
    return node


def _rewrite_quantile(node):
    _, exp = _sqlglot()
    if isinstance(node, exp.PercentileDisc) and not isinstance(node.parent, exp.WithinGroup):
        # DuckDB quantile_disc(x, q): the value at floor((n - 1) q), the lower median at 0.5; Spark's
        # percentile_disc(q) within group takes the first value whose cumulative share is >= q: the same
        # value. Dates go through their day number (Spark's percentile_disc takes numbers).
        value, quantile = node.this, node.expression
        day = exp.Anonymous(this="unix_date", expressions=[value.copy()])
        within = exp.WithinGroup(
            this=exp.PercentileDisc(this=quantile.copy()),
            expression=exp.Order(expressions=[exp.Ordered(this=day)]),
        )
        return exp.Anonymous(this="date_from_unix_date", expressions=[exp.cast(within, "int")])
    return node


def _rewrite_ordered_sum(node):
    _, exp = _sqlglot()
    if isinstance(node, exp.Sum) and isinstance(node.this, exp.Order):
        order = node.this
        value = order.this
        keys = [ordered.this for ordered in order.expressions]
        fields = [exp.PropertyEQ(this=exp.to_identifier(f"k{i}"), expression=key.copy()) for i, key in enumerate(keys)]
        fields.append(exp.PropertyEQ(this=exp.to_identifier("v"), expression=exp.cast(value.copy(), "double")))
        items = exp.Anonymous(
            this="array_sort",
            expressions=[exp.Anonymous(this="collect_list", expressions=[exp.Struct(expressions=fields)])],
        )
        fold = sqlglot_parse("aggregate(items, cast(0 as double), (total, item) -> total + item.v)", "spark")
        fold = fold.transform(lambda n: items.copy() if isinstance(n, exp.Column) and n.name == "items" else n)
        # DuckDB's sum of no rows is NULL; the fold of an empty list is 0
        return exp.Case(ifs=[exp.If(this=sqlglot_parse("count(*) > 0", "spark"), true=fold)])
    return node


def _rewrite_to_json(node):
    _, exp = _sqlglot()
    if isinstance(node, exp.Anonymous) and node.name.lower() == "to_json" and len(node.expressions) == 1:
        value = node.expressions[0]
        select = node.find_ancestor(exp.Select)
        aliases = {table.alias_or_name for table in select.find_all(exp.Table)} if select is not None else set()
        if isinstance(value, exp.Column) and not value.table and value.name in aliases:
            # DuckDB: a table alias is its row as a struct; Spark: struct(alias.*)
            value = exp.Struct(expressions=[exp.Column(this=exp.Star(), table=exp.to_identifier(value.name))])
        options = sqlglot_parse("map('ignoreNullFields', 'false')", "spark")
        return exp.Anonymous(this="to_json", expressions=[value.copy(), options])
    if isinstance(node, exp.Cast) and node.to.is_type("json"):  # JSON text stays text on Spark
        return node.this.copy()
    return node


def _rewrite_unpivot(node):
    """DuckDB's ``unpivot (query) on columns(*) into name n value v`` -> Spark's ``select * from (query)
    unpivot (v for n in (every column of the query))``."""
    _, exp = _sqlglot()
    if isinstance(node, exp.Pivot) and node.args.get("unpivot") and isinstance(node.this, exp.Subquery):
        if not (len(node.expressions) == 1 and isinstance(node.expressions[0], exp.Columns)):
            raise ValueError(f"unpivot {node.sql(dialect='duckdb')[:80]}: only 'on columns(*)' has a Spark rewrite")
        inner = node.this.this
        names = [expression.alias_or_name for expression in inner.expressions]
        into = node.args["into"]
        template = sqlglot_parse(
            f"select * from (select 1) as unpivoted unpivot (v for n in ({', '.join(f'`{n}`' for n in names)}))",
            "spark",
        )
        pivot = template.find(exp.Pivot)
        pivot.set("expressions", [exp.to_identifier(into.expressions[0].name)])
        pivot.args["fields"][0].set("this", exp.to_identifier(into.this.name))
        template.find(exp.Subquery).set("this", inner.copy())
        if node.args.get("with_") is not None:
            template.set("with_", node.args["with_"].copy())
        return template
    return node


def _rewrite_range_table(node):
    """DuckDB's table function ``from range(a, b)`` (one column named range) -> a subquery exploding
    Spark's sequence (Spark's own range() takes constants only, and names its column id)."""
    _, exp = _sqlglot()
    if isinstance(node, exp.Table) and isinstance(node.this, exp.GenerateSeries):
        series = node.this
        column = "range" if series.args.get("is_end_exclusive") else "generate_series"
        query = exp.select(exp.alias_(exp.Explode(this=series.copy()), column))
        alias = node.args.get("alias")
        return exp.Subquery(this=query, alias=alias.copy() if alias is not None else exp.TableAlias(this=exp.to_identifier(column)))
    return node


def _rewrite_avg(node):
    """avg(x) -> try_divide(cast(sum(x) as double), count(x)) (a FILTER moved onto both): DuckDB's mean of a
    DECIMAL is a DOUBLE of the exact sum over the count; Spark's is a DECIMAL rounded to 4 more places."""
    _, exp = _sqlglot()
    filtered = isinstance(node, exp.Filter) and isinstance(node.this, exp.Avg)
    if filtered or (isinstance(node, exp.Avg) and not isinstance(node.parent, exp.Filter)):
        average = node.this if filtered else node
        value = average.this

        def wrapped(aggregate):
            return exp.Filter(this=aggregate, expression=node.expression.copy()) if filtered else aggregate

        total = exp.cast(wrapped(exp.Sum(this=value.copy())), "double")
        count = wrapped(exp.Count(this=value.copy()))
        return exp.Anonymous(this="try_divide", expressions=[total, count])
    return node


def _rewrite_division(node):
    """a / b -> cast(a as double) / b: DuckDB's '/' gives a DOUBLE for any numbers (365.25 / 12 is the
    double 30.4375); Spark's gives a DECIMAL for decimals (number literals are decimals) and rounds the
    quotient to its scale."""
    _, exp = _sqlglot()
    if isinstance(node, exp.Div) and not (isinstance(node.this, exp.Cast) and node.this.to.is_type("double")):
        return exp.Div(this=exp.cast(node.this.copy(), "double"), expression=node.expression.copy())
    return node


def _rewrite_slice(node):
    _, exp = _sqlglot()
    if isinstance(node, exp.Bracket) and len(node.expressions) == 1 and isinstance(node.expressions[0], exp.Slice):
        piece = node.expressions[0]
        if piece.expression is not None:
            raise ValueError(f"list slice {node.sql()} with an end has no Spark rewrite")
        start = piece.this
        array = node.this
        if isinstance(start, exp.Identifier):
            start = exp.column(start)
        size = exp.Anonymous(this="size", expressions=[array.copy()])
        length = exp.Greatest(
            this=exp.Sub(this=exp.Add(this=size, expression=exp.Literal.number(1)), expression=start.copy()),
            expressions=[exp.Literal.number(0)],
        )
        return exp.Anonymous(this="slice", expressions=[array.copy(), start.copy(), length])
    return node


def _rewrite_length(node):
    _, exp = _sqlglot()
    if isinstance(node, exp.Length):  # the models use len() on lists only (size() of text fails loudly on Spark)
        return exp.Anonymous(this="size", expressions=[node.this.copy()])
    return node


def _rewrite_to_months(node):
    _, exp = _sqlglot()
    if isinstance(node, exp.Sub) and isinstance(node.expression, exp.Anonymous) and node.expression.name.lower() == "to_months":
        months = node.expression.expressions[0]
        return exp.Anonymous(this="add_months", expressions=[node.this.copy(), exp.Neg(this=exp.paren(months.copy()))])
    return node


def _rewrite_functions(node):
    _, exp = _sqlglot()
    if isinstance(node, exp.RegexpFullMatch):
        pattern = node.expression
        return exp.RegexpLike(this=node.this.copy(), expression=exp.Literal.string(f"^(?:{pattern.name})$"))
    if isinstance(node, exp.Anonymous):
        name = node.name.lower()
        args = node.expressions
        if name == "isfinite":
            (value,) = args
            return sqlglot_parse(
                "case when v is null then null else not isnan(v) and abs(v) <> cast('Infinity' as double) end",
                "spark",
            ).transform(lambda n: value.copy() if isinstance(n, exp.Column) and n.name == "v" else n)
        if name == "try_strptime":
            text, fmt = args
            if fmt.name != "%Y-%m":
                raise ValueError(f"try_strptime format {fmt.name} has no Spark rewrite")
            return exp.Anonymous(
                this="to_date",
                expressions=[exp.Anonymous(this="try_to_timestamp", expressions=[text.copy(), exp.Literal.string("yyyy-MM")])],
            )
        if name == "to_months":
            raise ValueError("to_months is rewritten only as date - to_months(n)")
    return node


# DuckDB's text-to-date cast takes an ISO date (year, month, day with 1-2 digit month and day), with
# optional surrounding spaces, an optional ' (BC)' era or a time after it; Spark's also takes a bare year or
# year-month. Only text of DuckDB's shape is passed to Spark's try_cast.
_DUCKDB_DATE_TEXT = r"^\s*-?\d{1,7}-\d{1,2}-\d{1,2}(?:[ T]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?)?\s*$"


def _rewrite_try_cast_date(node):
    _, exp = _sqlglot()
    if isinstance(node, exp.TryCast) and node.to.is_type("date") and not node.this.is_type("date"):
        text = node.this
        shaped = exp.RegexpLike(this=text.copy(), expression=exp.Literal.string(_DUCKDB_DATE_TEXT))
        return exp.Case(ifs=[exp.If(this=shaped, true=node.copy())])
    return node


_SPARK_REWRITES = (
    _rewrite_division,
    _rewrite_avg,
    _rewrite_range_table,
    _rewrite_unpivot,
    _rewrite_to_months,
    _rewrite_date_diff,
    _rewrite_quantile,
    _rewrite_ordered_sum,
    _rewrite_to_json,
    _rewrite_slice,
    _rewrite_length,
    _rewrite_functions,
    _rewrite_try_cast_date,
)


def sqlglot_parse(sql: str, dialect: str) -> "exp.Expression":
    sqlglot, _ = _sqlglot()
    return sqlglot.parse_one(sql, read=dialect)


def to_spark(tree: "exp.Expression") -> str:
    """Spark SQL for a DuckDB query tree (macros expanded, parameters bound)."""
    _, exp = _sqlglot()
    for rewrite in _SPARK_REWRITES:
        tree = tree.transform(rewrite, copy=False)
    return tree.sql(dialect="spark", pretty=True)


def spark_sql(sql: str, parameters: Mapping[str, Any]) -> str:
    """One DuckDB model's text as Spark SQL, with its parameters bound as literals."""
    tree = sqlglot_parse(sql, "duckdb")
    return to_spark(bind_parameters(expand_macros(tree), parameters))


# ------------------------------------------------------------------------------------- the session


def spark_master(config: RunConfig | None = None) -> str | None:
    """The master URL asked for: --spark-master (config.spark_master), else $WARRANTY_FORECAST_SPARK_MASTER,
    else None (`get_spark_session` then takes spark-submit's master, or local[2])."""
    configured = config.spark_master if config is not None else None
    return configured or os.environ.get(SPARK_MASTER_ENV) or None


def get_spark_session(master: str | None = None) -> "SparkSession":
    """The active SparkSession, or a new one: a Spark Connect session when SPARK_REMOTE is set (pyspark
    reads it); else on `master`; else, under spark-submit (which starts the JVM and passes its gateway), on
    the master spark-submit was given; else local[2]. Arrow moves the small outputs to pandas; UTC."""
    try:
        from pyspark.sql import SparkSession
    except ImportError as error:  # pragma: no cover
        raise ImportError(
            "the Spark engine needs the optional extra: pip install 'warranty-forecast[spark]'"
        ) from error
    active = SparkSession.getActiveSession()
    if active is not None:
        return active
    builder = SparkSession.builder.appName("warranty-forecast")
    under_spark_submit = "PYSPARK_GATEWAY_PORT" in os.environ
    if not os.environ.get(SPARK_REMOTE_ENV) and (master or not under_spark_submit):
        master = master or DEFAULT_MASTER
        builder = builder.master(master)
        if master.startswith("local"):  # one machine: few shuffle partitions, no web UI
            builder = builder.config("spark.sql.shuffle.partitions", "4").config("spark.ui.enabled", "false")
    return (
        builder.config("spark.sql.session.timeZone", "UTC")
        .config("spark.sql.execution.arrow.pyspark.enabled", "true")
        .getOrCreate()
    )


# ------------------------------------------------------------------------------------ the raw layer


def _read_header_line(spark: "SparkSession", path: str) -> str:
    lines = spark.read.text(path)
    first = lines.limit(1).collect()
    if not first:
        return ""
    return first[0][0]


def _numbered_lines(spark: "SparkSession", path: str) -> "DataFrame":
    """The file's text lines with their 0-based line number in file order (the header is line 0).

    A text file's partitions are its splits in file order; monotonically_increasing_id holds the partition
    in its upper bits and the row within it in its lower 33: each partition's row count gives its offset.
    """
    from pyspark.sql import functions as F

    lines = spark.read.text(path).select(
        F.col("value").alias("line"),
        F.spark_partition_id().alias("part"),
        F.monotonically_increasing_id().alias("mono"),
    ).localCheckpoint()
    counts = sorted((row["part"], row["n"]) for row in lines.groupBy("part").agg(F.count("*").alias("n")).collect())
    offsets, total = [], 0
    for part, count in counts:
        offsets.append((part, total))
        total += count
    if not offsets:
        return lines.select("line", F.lit(0).cast("bigint").alias("line_number")).limit(0)
    offset_frame = spark.createDataFrame(offsets, "part int, offset bigint")
    return lines.join(F.broadcast(offset_frame), "part").select(
        "line",
        (F.col("offset") + (F.col("mono") - F.shiftleft(F.col("part").cast("bigint"), 33))).alias("line_number"),
    )


def _csv_names(line: str, where: str) -> list[str]:
    try:
        return next(csv.reader(io.StringIO(line, newline=""), strict=True), [])
    except csv.Error as error:
        raise ContractError(f"{where}: the header line (line 1) cannot be split into columns: {error}") from None


def load_extract_on_spark(spark: "SparkSession", path: str, contract: ExtractContract) -> list[str]:
    """Temp views ``raw_<name>`` and ``raw_<name>_malformed`` for one extract (CSV or Parquet, any path Spark
    reads); returns the ignored columns. The header is held to the contract by `extracts.check_header`.

    CSV: a data line is row (line number); a line whose field count is not the header's, or that holds an
    odd number of double quotes, is malformed (problem_column: the first missing or the header's last
    column; raw_values: the line). A quoted field holding a line break is not supported here (its lines are
    malformed), unlike the DuckDB engine, which reads it as one row.
    """
    from pyspark.sql import functions as F
    from pyspark.sql.utils import AnalysisException

    raw, malformed = raw_tables(contract)
    lowered = path.lower()
    where = f"{contract.name} extract {path}"
    try:
        if lowered.endswith(".parquet"):
            frame = spark.read.parquet(path)
            header = check_header(list(frame.schema.names), Path(path), contract)
            in_file = [name for name in frame.schema.names if name in header.contract_columns]  # file order
            columns = [F.col(f"`{name}`").cast("string").alias(name) for name in in_file]
            missing = [F.lit(None).cast("string").alias(c) for c in contract.columns if c not in header.contract_columns]
            frame.select(
                (F.col("_metadata.row_index") + 1).alias("source_row_number"), *columns, *missing
            ).createOrReplaceTempView(raw)
            spark.sql(
                "select cast(0 as bigint) as source_row_number, '' as problem_column, '' as problem_reason,"
                " '' as problem_detail, '' as raw_values where false"
            ).createOrReplaceTempView(malformed)
            return list(header.ignored)
        if not lowered.endswith(".csv"):
            raise InputUnreadableError(f"{where}: unsupported file type; use .csv or .parquet")
        first = _read_header_line(spark, path)
    except AnalysisException as error:
        raise InputUnreadableError(f"{where} cannot be read: {str(error).splitlines()[0]}") from None
    if first.startswith("\ufeff"):
        first = first[1:]
    if not first.strip():
        raise ContractError(f"{where} has no header line: the file is empty (a CSV extract needs its header)")
    names = _csv_names(first, where)
    header = check_header(names, Path(path), contract)
    width = len(names)
    schema = ", ".join(f"`c{i}` string" for i in range(width))
    lines = _numbered_lines(spark, path).where(F.col("line_number") > 0)
    # fields outside quotes: commas left after removing the quoted parts
    unquoted = F.regexp_replace(F.col("line"), '"(?:[^"]|"")*"', "")
    fields = F.length(unquoted) - F.length(F.regexp_replace(unquoted, ",", "")) + 1
    quotes = F.length(F.col("line")) - F.length(F.regexp_replace(F.col("line"), '"', ""))
    checked = lines.select(
        F.col("line_number").alias("source_row_number"),
        "line",
        fields.alias("fields"),
        (quotes % 2 == 1).alias("has_open_quote"),
    )
    is_bad = F.col("has_open_quote") | (F.col("fields") != width)
    parsed = checked.where(~is_bad).select(
        "source_row_number",
        F.from_csv(F.col("line"), schema, {"quote": '"', "escape": '"', "mode": "PERMISSIVE",
                                           "ignoreLeadingWhiteSpace": "false", "ignoreTrailingWhiteSpace": "false",
                                           "nullValue": "\u0000never\u0000"}).alias("row"),
    )
    position = {name: i for i, name in enumerate(names)}
    # DuckDB's order: the file's contract columns in file order, then those it lacks (as NULL)
    selected = [F.col(f"row.c{position[c]}").alias(c) for c in names if c in contract.columns] + [
        F.lit(None).cast("string").alias(c) for c in contract.columns if c not in position
    ]
    parsed.select("source_row_number", *selected).createOrReplaceTempView(raw)
    column_names = F.array(*[F.lit(n) for n in names])
    problem_column = F.when(
        F.col("has_open_quote"), F.lit(names[-1])
    ).when(F.col("fields") < width, F.element_at(column_names, F.col("fields").cast("int") + 1)).otherwise(F.lit(names[-1]))
    # the words of DuckDB's rejects table (error type, then its message), so both engines describe a line alike
    counted = F.concat(F.lit(f"Expected Number of Columns: {width} Found: "), F.col("fields").cast("string"))
    kind = F.when(
        F.col("has_open_quote"), F.lit("unquoted value (Value with unterminated quote found)")
    ).when(
        F.col("fields") < width, F.concat(F.lit("missing columns ("), counted, F.lit(")"))
    ).otherwise(F.concat(F.lit("too many columns ("), counted, F.lit(")")))
    cut = F.substring(F.col("line"), 1, 2000)
    checked.where(is_bad).select(
        "source_row_number",
        problem_column.alias("problem_column"),
        F.lit("malformed_line").alias("problem_reason"),
        F.concat(kind, F.lit(": "), cut).alias("problem_detail"),
        F.to_json(F.struct(cut.alias("line"))).alias("raw_values"),
    ).createOrReplaceTempView(malformed)
    return list(header.ignored)


# ------------------------------------------------------------------------------------ the stage


def _materialise(spark: "SparkSession", name: str, sql: str) -> None:
    spark.sql(sql).localCheckpoint(eager=True).createOrReplaceTempView(name)  # lineage cut: plans stay small


def _run_models(spark, models, parameters, seconds: dict[str, float]) -> None:
    for model in models:
        started = time.perf_counter()
        used = {key: parameters[key] for key in model.parameters}
        sql = spark_sql(model.sql, used)
        transpiled = time.perf_counter()
        try:
            _materialise(spark, model.name, sql)
        except Exception as error:
            raise RuntimeError(f"SQL model {model.path} failed on Spark: {str(error).splitlines()[0]}") from error
        finished = time.perf_counter()
        log.debug("spark model %s: transpiled in %.2f s, ran in %.2f s", model.path, transpiled - started, finished - transpiled)
        seconds[model.layer] = seconds.get(model.layer, 0.0) + finished - started


def read_spark_table(spark: "SparkSession", model: Model) -> pd.DataFrame:
    """An output's view as DuckDB's `read_table` gives it: sorted by `Sort:` (nulls last, as DuckDB),
    decimals as float64, dates as `datetime.date`, integer columns holding nulls as float64."""
    from pyspark.sql import functions as F
    from pyspark.sql import types as T

    frame = spark.table(model.name)
    if model.sort:
        frame = frame.orderBy(*[F.col(f"`{column}`").asc_nulls_last() for column in model.sort])
    schema = {field.name: field.dataType for field in frame.schema.fields}
    result = frame.toPandas()
    for name, kind in schema.items():
        column = result[name]
        if isinstance(kind, (T.StringType, T.ArrayType, T.DateType)) and result.empty:
            result[name] = column.astype(object)  # as DuckDB gives an empty text, list or date column
        elif isinstance(kind, T.DecimalType):
            result[name] = column.astype("float64")
        elif isinstance(kind, T.DateType):
            result[name] = column.astype(object).where(column.notna(), None)
        elif isinstance(kind, T.ArrayType):
            result[name] = [None if v is None else list(v) for v in column]
    return result


_SCHEME_FOLDED = re.compile(r"^([A-Za-z][A-Za-z0-9+.-]+):/(?!/)")


def spark_path(path: Path | str) -> str:
    """An extract's path as Spark reads it: a URL such as s3a://bucket/key keeps its '//' (pathlib folds it
    to one slash); a local path is made absolute."""
    text = str(path)
    if _SCHEME_FOLDED.match(text):
        return _SCHEME_FOLDED.sub(r"\1://", text, count=1)
    if "://" in text:
        return text
    return os.path.abspath(text)


def shape_extracts_on_spark(config: RunConfig, spark: "SparkSession | None" = None) -> ShapedData:
    """The shaping stage on Spark: the same plan, parameters and checks as `shaping.shape_extracts`.

    `spark`: a session to use (tests, spark-submit); else the active one, or a new one on
    `spark_master(config)` (a Spark Connect session when SPARK_REMOTE is set).
    """
    spark = spark or get_spark_session(spark_master(config))
    # Spark 4's optimizer fails on rows_quarantined_with_reason ("key not found" while rewriting the
    # constraints of its union of a checkpointed table with two joins, seen on the demo data); constraint
    # propagation only adds inferred not-null filters, so the job runs without it.
    spark.conf.set("spark.sql.constraintPropagation.enabled", "false")
    seconds: dict[str, float] = {}
    started = time.perf_counter()
    shipments_file, claims_file = spark_path(config.shipments_path), spark_path(config.claims_path)
    ignored = {
        "shipments": load_extract_on_spark(spark, shipments_file, SHIPMENTS),
        "claims": load_extract_on_spark(spark, claims_file, CLAIMS),
    }
    seconds["raw"] = time.perf_counter() - started
    plan = model_plan()
    parameters = run_parameters(config)
    before_as_of = upstream_of(plan, NEWEST_DATES_MODEL)
    _run_models(spark, before_as_of, parameters, seconds)
    newest = spark.table(NEWEST_DATES_MODEL).collect()
    if len(newest) != 1:
        raise ValueError(f"table {NEWEST_DATES_MODEL} holds {len(newest)} rows, not one")
    newest_claim_date, newest_ship_date = newest[0]["newest_claim_date"], newest[0]["newest_ship_date"]
    as_of_date, as_of_source = choose_as_of(config.as_of_date, newest_claim_date, newest_ship_date, config.run_date)
    parameters.update(as_of_parameters(config, as_of_date))
    parameters.update({"shipments_file": shipments_file, "claims_file": claims_file})
    _run_models(spark, [model for model in plan if model not in before_as_of], parameters, seconds)
    tables = {model.name: read_spark_table(spark, model) for model in plan if model.layer == "outputs"}
    return shaped_data(
        config, tables, as_of_date, as_of_source, newest_claim_date, newest_ship_date, ignored, seconds
    )
