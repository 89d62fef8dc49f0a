-- quarantine: every input row that was not used, with where it is and why.
-- Grain: one row per quarantined data row of either extract (malformed CSV lines included).
-- Parameters: none.
-- Reads: rows_quarantined_with_reason, extracts_read.
-- Sort: extract, row_number
-- source_file is the extract's absolute path. Per extract, the count of rows here equals
-- reconciliation.rows_quarantined.
with quarantined_rows as (
    select extract, source_row_number, problem_column, problem_reason, problem_detail, raw_values
    from rows_quarantined_with_reason
),

extract_files as (
    select extract, source_file
    from extracts_read
)

select
    quarantined_rows.extract,
    extract_files.source_file,
    quarantined_rows.source_row_number as row_number,
    quarantined_rows.problem_column as "column",
    quarantined_rows.problem_reason as reason,
    quarantined_rows.problem_detail as detail,
    quarantined_rows.raw_values::varchar as raw_values
from quarantined_rows
join extract_files on quarantined_rows.extract = extract_files.extract
