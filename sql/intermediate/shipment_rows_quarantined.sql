-- shipment_rows_quarantined: every data row of the shipments extract that was not used, with why, and the
-- row as it was read.
-- Grain: one row per quarantined data row of the shipments extract (malformed CSV lines included).
-- Parameters: none.
-- Reads: raw_shipments, raw_shipments_malformed, stg_shipments.
-- A shipment row fails in one place only: a malformed line (raw) or a row check (staging). raw_values holds
-- the row as read (its contract columns as text, or the malformed line) in JSON. A model of its own (the
-- claims' side is in rows_quarantined_with_reason) so that the two large shipment tables, raw and staged,
-- are done right after staging and their memory is free for the later models.
with shipment_problems as (
    select source_row_number, problem_column, problem_reason, problem_detail
    from stg_shipments
    where is_quarantined
),

shipment_rows_with_problem as (
    select 'shipments' as extract, checked.*, to_json(raw_row) as raw_values
    from shipment_problems as checked
    join raw_shipments as raw_row on checked.source_row_number = raw_row.source_row_number
),

malformed_lines as (
    select 'shipments' as extract, source_row_number, problem_column, problem_reason, problem_detail, raw_values
    from raw_shipments_malformed
)

select extract, source_row_number, problem_column, problem_reason, problem_detail, raw_values
from shipment_rows_with_problem
union all
select extract, source_row_number, problem_column, problem_reason, problem_detail, raw_values::json
from malformed_lines
