-- csv_malformed_lines: data lines of a CSV extract that could not be split into the header's columns.
-- Grain: one row per malformed data line. Parameters: $rejects_table.
-- Reads: the rejects table DuckDB filled while csv_extract.sql ran.
-- source_row_number is the 1-based data row (file line minus the header line).
with rejected_errors as (
    select line, column_name, error_type, csv_line
    from query_table($rejects_table)
),

first_error_per_line as (
    select
        (line - 1)::bigint as source_row_number,
        coalesce(column_name, '') as column_name,
        error_type,
        csv_line,
        row_number() over (partition by line order by error_type, column_name) as error_rank
    from rejected_errors
)

select
    source_row_number,
    column_name as problem_column,
    'malformed_line' as problem_reason,
    lower(error_type) || ': ' || csv_line as problem_detail,
    to_json({'line': csv_line}) as raw_values
from first_error_per_line
where error_rank = 1
