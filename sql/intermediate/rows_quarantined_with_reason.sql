-- rows_quarantined_with_reason: every data row of either extract that was not used, with why, and the row
-- as it was read.
-- Grain: one row per quarantined data row of either extract (malformed CSV lines included).
-- Parameters: none.
-- Reads: shipment_rows_quarantined, raw_claims, raw_claims_malformed, stg_claims,
--   claims_checked_against_shipments.
-- A row fails in one place only: a malformed line (raw), a row check (staging), or for a claim filed by
-- the as-of date a check against the shipments. raw_values holds the row as read (its contract columns as
-- text, or the malformed line) in JSON. The shipments' rows come from shipment_rows_quarantined.
with claim_problems as (
    select source_row_number, problem_column, problem_reason, problem_detail
    from stg_claims
    where is_quarantined
    union all
    select source_row_number, problem_column, problem_reason, problem_detail
    from claims_checked_against_shipments
    where is_quarantined
),

claim_rows_with_problem as (
    select 'claims' as extract, checked.*, to_json(raw_row) as raw_values
    from claim_problems as checked
    join raw_claims as raw_row on checked.source_row_number = raw_row.source_row_number
),

malformed_lines as (
    select 'claims' as extract, source_row_number, problem_column, problem_reason, problem_detail, raw_values
    from raw_claims_malformed
)

select extract, source_row_number, problem_column, problem_reason, problem_detail, raw_values
from shipment_rows_quarantined
union all
select extract, source_row_number, problem_column, problem_reason, problem_detail, raw_values
from claim_rows_with_problem
union all
select extract, source_row_number, problem_column, problem_reason, problem_detail, raw_values::json
from malformed_lines
