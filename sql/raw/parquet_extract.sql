-- parquet_extract: a Parquet extract's contract columns turned to text, so that staging types and checks
-- CSV and Parquet extracts the same way.
-- Grain: one row per row of the file.
-- Parameters: $path, $contract_columns (the contract columns the file holds; extracts.py read them from
--   the file's schema; other columns are not read); $empty_contract_row (a struct: every contract column
--   -> NULL), so that an optional column the file lacks is added as empty text after the file's columns.
-- Reads: the file only. source_row_number is the 1-based row of the file, from the reader's own row
-- number (file_row_number, counted across row groups). A file that holds a column of that name cannot be
-- read this way: extracts.py then runs parquet_extract_by_position, which gives the same table more
-- slowly (about 2.5x at 10 M rows).
with numbered_rows as (
    select
        file_row_number + 1 as source_row_number,
        columns(lambda column_name: list_contains($contract_columns, column_name))::varchar
    from read_parquet($path, file_row_number = true)
)

from numbered_rows
union all by name
select columns(*)::varchar from (select unnest($empty_contract_row)) where false
