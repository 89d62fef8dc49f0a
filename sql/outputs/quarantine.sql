-- quarantine: every input row that was not used, with where it is and why.
-- Grain: one row per quarantined data row of either extract (malformed CSV lines included).
-- Parameters: $shipments_file, $claims_file (each extract's path as given, made absolute: the
--   source_file column, so that two extracts with the same file name can be told apart).
-- Reads: raw_shipments, raw_shipments_malformed, stg_shipments, raw_claims, raw_claims_malformed,
--   stg_claims, claims_matched_to_units.
-- raw_values holds the row as read (its contract columns as text, or the malformed line) in JSON.
-- Per extract, the count of rows here equals reconciliation.rows_quarantined.
with shipment_rows_failing_checks as (
    select
        checked.source_row_number,
        checked.problem_column,
        checked.problem_reason,
        checked.problem_detail,
        to_json(raw_row) as raw_values
    from stg_shipments as checked
    join raw_shipments as raw_row on checked.source_row_number = raw_row.source_row_number
    where checked.is_quarantined
),

malformed_shipment_lines as (
    select source_row_number, problem_column, problem_reason, problem_detail, raw_values
    from raw_shipments_malformed
),

claim_rows_failing_checks as (
    select
        checked.source_row_number,
        checked.problem_column,
        checked.problem_reason,
        checked.problem_detail,
        to_json(raw_row) as raw_values
    from stg_claims as checked
    join raw_claims as raw_row on checked.source_row_number = raw_row.source_row_number
    where checked.is_quarantined
),

malformed_claim_lines as (
    select source_row_number, problem_column, problem_reason, problem_detail, raw_values
    from raw_claims_malformed
),

claims_failing_shipment_checks as (
    select
        matched.source_row_number,
        matched.problem_column,
        matched.problem_reason,
        matched.problem_detail,
        to_json(raw_row) as raw_values
    from claims_matched_to_units as matched
    join raw_claims as raw_row on matched.source_row_number = raw_row.source_row_number
    where matched.is_quarantined
),

all_quarantined as (
    select 'shipments' as extract, $shipments_file as source_file, * from shipment_rows_failing_checks
    union all
    select 'shipments' as extract, $shipments_file as source_file, * from malformed_shipment_lines
    union all
    select 'claims' as extract, $claims_file as source_file, * from claim_rows_failing_checks
    union all
    select 'claims' as extract, $claims_file as source_file, * from malformed_claim_lines
    union all
    select 'claims' as extract, $claims_file as source_file, * from claims_failing_shipment_checks
)

select
    extract,
    source_file,
    source_row_number as row_number,
    problem_column as "column",
    problem_reason as reason,
    problem_detail as detail,
    raw_values::varchar as raw_values
from all_quarantined
order by extract, row_number
