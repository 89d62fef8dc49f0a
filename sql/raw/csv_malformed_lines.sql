-- csv_malformed_lines: data lines of a CSV extract that could not be split into the header's columns.
-- Grain: one row per malformed data line. Parameters: $rejects_table.
-- Reads: the rejects table DuckDB filled while csv_extract.sql ran (one row per error: a short line has one
-- per missing column); the first error of a line, by type and then column position, describes it.
-- source_row_number is the 1-based data row (DuckDB's line, which counts a quoted line break as part of
-- its row, minus the header line). A line holding an unterminated quote runs to the end of the file: the
-- text kept in problem_detail and raw_values is cut at 2,000 characters.
with rejected_errors as (
    select line, column_idx, column_name, error_type, error_message, csv_line
    from query_table($rejects_table)
),

first_error_per_line as (
    select
        (line - 1)::bigint as source_row_number,
        coalesce(column_name, '') as column_name,
        error_type,
        error_message,
        csv_line,
        row_number() over (partition by line order by error_type, column_idx) as error_rank
    from rejected_errors
)

select
    source_row_number,
    column_name as problem_column,
    'malformed_line' as problem_reason,
    lower(error_type) || ' (' || rtrim(error_message, '.') || '): ' || left(csv_line, 2000) as problem_detail,
    to_json({'line': left(csv_line, 2000)}) as raw_values
from first_error_per_line
where error_rank = 1
