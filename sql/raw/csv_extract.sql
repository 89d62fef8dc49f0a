-- csv_extract: a CSV extract's contract columns read as text, exactly as the file holds them.
-- Grain: one row per data line that DuckDB could split into the header's columns.
-- Parameters: $path (the file); $columns (every column of the file in order, name -> 'VARCHAR', named by
--   extracts.py from the header it parsed itself: a contract column by its name, any other column
--   ignored_column_<position>, so that no name in the file can clash with a name DuckDB adds);
--   $contract_columns (the contract columns the header holds); $rejects_table and $rejects_scan (DuckDB
--   writes the lines it could not split there; csv_malformed_lines.sql reads them).
-- Reads: the file only, with the dialect fixed (comma, double quote, header line) and no sniffing.
-- accepted_row_number counts accepted lines; csv_numbered_rows.sql turns it into the data row number.
select
    ordinality as accepted_row_number,
    columns(lambda column_name: list_contains($contract_columns, column_name))
from read_csv(
    $path,
    header = true,
    auto_detect = false,
    columns = $columns,
    delim = ',',
    quote = '"',
    escape = '"',
    store_rejects = true,
    rejects_table = $rejects_table,
    rejects_scan = $rejects_scan
) with ordinality
