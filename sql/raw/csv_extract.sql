-- csv_extract: a CSV extract read as text, exactly as the file holds it.
-- Grain: one row per data line that DuckDB could split into the header's columns.
-- Parameters: $path (the file), $rejects_table and $rejects_scan (DuckDB writes the lines it could
--   not split there; csv_malformed_lines.sql reads them).
-- Reads: the file only. accepted_row_number counts accepted lines; csv_numbered_rows.sql turns it into
--   the data row number of the file.
select
    ordinality as accepted_row_number,
    columns(* exclude (ordinality))
from read_csv(
    $path,
    header = true,
    all_varchar = true,
    delim = ',',
    quote = '"',
    escape = '"',
    store_rejects = true,
    rejects_table = $rejects_table,
    rejects_scan = $rejects_scan
) with ordinality
