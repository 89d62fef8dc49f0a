-- csv_numbered_rows: the accepted lines of a CSV extract with their 1-based data row number.
-- Grain: one row per accepted data line.
-- Parameters: $accepted_table, $malformed_table; $empty_contract_row (a struct: every contract column ->
--   NULL), so that an optional column the file lacks is added as empty text after the file's columns.
-- Reads: the tables written from csv_extract.sql and csv_malformed_lines.sql.
-- Malformed lines are missing from the accepted lines, so the k-th accepted line is the k-th data row
-- that is not malformed. (A quoted field holding a line break counts as one data row.)
with accepted_lines as (
    select * from query_table($accepted_table)
),

malformed_rows as (
    select source_row_number from query_table($malformed_table)
),

all_row_numbers as (
    select range + 1 as source_row_number
    from range((select count(*) from accepted_lines) + (select count(*) from malformed_rows))
),

accepted_row_numbers as (
    select
        source_row_number,
        row_number() over (order by source_row_number) as accepted_row_number
    from all_row_numbers
    anti join malformed_rows using (source_row_number)
),

numbered_lines as (
    select
        accepted_row_numbers.source_row_number,
        accepted_lines.* exclude (accepted_row_number)
    from accepted_lines
    join accepted_row_numbers using (accepted_row_number)
)

from numbered_lines
union all by name
select columns(*)::varchar from (select unnest($empty_contract_row)) where false
