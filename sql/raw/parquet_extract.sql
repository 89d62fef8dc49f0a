-- parquet_extract: a Parquet extract with every column turned to text, so that staging types and
-- checks CSV and Parquet extracts the same way.
-- Grain: one row per row of the file. Parameters: $path.
-- Reads: the file only. source_row_number is the 1-based row of the file.
select
    file_row_number + 1 as source_row_number,
    columns(* exclude (file_row_number))::varchar
from read_parquet($path, file_row_number = true)
