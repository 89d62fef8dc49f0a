-- empty_malformed_lines: the malformed lines of an extract that has none (a Parquet file has no lines to
-- split), so that every extract has the same tables whatever its format.
-- Grain: no rows; the columns of csv_malformed_lines.sql.
-- Parameters: none.
-- Reads: nothing.
select
    0::bigint as source_row_number,
    ''::varchar as problem_column,
    ''::varchar as problem_reason,
    ''::varchar as problem_detail,
    ''::varchar as raw_values
where false
