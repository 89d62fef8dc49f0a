-- parquet_extract_by_position: parquet_extract's table for a file that holds a column named
-- file_row_number (the name of the reader's own row number, which then cannot be asked for).
-- Grain: one row per row of the file.
-- Parameters: $path, $contract_columns (the contract columns the file holds; extracts.py read them from
--   the file's schema; other columns are not read); $empty_contract_row (a struct: every contract column
--   -> NULL), so that an optional column the file lacks is added as empty text after the file's columns.
-- Reads: the file only. source_row_number is the 1-based row of the file: a range of row numbers joined
-- to the file's rows by position (not DuckDB's file_row_number or ordinality columns, whose names a file
-- may also use).
with numbered_rows as (
    select
        row_numbers.range + 1 as source_row_number,
        columns(lambda column_name: list_contains($contract_columns, column_name))::varchar
    from range((select count(*) from read_parquet($path))) as row_numbers
    positional join read_parquet($path) as file_rows
)

from numbered_rows
union all by name
select columns(*)::varchar from (select unnest($empty_contract_row)) where false
