-- stg_claims: the claims extract typed and checked, row by row (checks that need the shipments are in
-- intermediate/claims_checked_against_shipments.sql).
-- Grain: one row per data row of the claims file (one claim).
-- Parameters: $run_date (no date may be later).
-- Reads: raw_claims.
-- raw_claims holds every contract column as text, plus source_row_number; the checks are the macros
-- of macros/validation.
-- A row that fails a check carries the FIRST failed check, in the order written below, as
-- problem_column / problem_reason (a stable code) / problem_detail (for people); valid rows carry nulls.
-- status is case-insensitive and defaults to approved when empty. Accepted: approved, rejected,
-- no_fault_found (decided) and open, pending (filed, not yet decided: config.ClaimSettings.open_statuses).
-- cost is required, except for an open claim (status open or pending), whose cost is its estimate when
-- given: an open claim with no estimate is priced by the reserve stage.
with raw_rows as (
    select
        source_row_number,
        claim_id,
        product,
        build_month,
        sale_date,
        failure_date,
        claim_date,
        cost,
        status,
        failure_code,
        serial
    from raw_claims
),

trimmed_text as (
    select
        source_row_number,
        nullif(trim(claim_id), '') as claim_id_text,
        nullif(trim(product), '') as product_text,
        nullif(trim(build_month), '') as build_month_text,
        nullif(trim(sale_date), '') as sale_date_text,
        nullif(trim(failure_date), '') as failure_date_text,
        nullif(trim(claim_date), '') as claim_date_text,
        nullif(trim(cost), '') as cost_text,
        coalesce(lower(nullif(trim(status), '')), 'approved') as status_text,
        nullif(trim(failure_code), '') as failure_code_text,
        nullif(trim(serial), '') as serial_text
    from raw_rows
),

typed_values as (
    select
        *,
        parse_build_month(build_month_text) as parsed_build_month,
        try_cast(sale_date_text as date) as parsed_sale_date,
        try_cast(failure_date_text as date) as parsed_failure_date,
        try_cast(claim_date_text as date) as parsed_claim_date,
        try_cast(cost_text as decimal(18, 2)) as parsed_cost
    from trimmed_text
),

row_checks as (
    select
        *,
        coalesce(
            check_present('claim_id', claim_id_text),
            check_present('product', product_text),
            check_present('build_month', build_month_text),
            check_date('build_month', build_month_text, parsed_build_month, 'YYYY-MM or a date', $run_date),
            check_present('failure_date', failure_date_text),
            check_date('failure_date', failure_date_text, parsed_failure_date, 'a date', $run_date),
            check_present('claim_date', claim_date_text),
            check_date('claim_date', claim_date_text, parsed_claim_date, 'a date', $run_date),
            check_date('sale_date', sale_date_text, parsed_sale_date, 'a date', $run_date),
            case when status_text not in ('open', 'pending') then check_present('cost', cost_text) end,
            check_parsed('cost', cost_text, parsed_cost, 'a decimal number'),
            check_that(parsed_cost < 0, 'cost', 'negative_cost', 'cost ' || cost_text || ' is negative'),
            check_that(
                status_text not in ('approved', 'rejected', 'no_fault_found', 'open', 'pending'),
                'status', 'unknown_status',
                'status ' || status_text || ' is not approved, rejected, no_fault_found, open or pending'
            ),
            check_that(
                parsed_claim_date < parsed_failure_date,
                'claim_date', 'claim_before_failure',
                'claim_date ' || parsed_claim_date || ' is before failure_date ' || parsed_failure_date
            ),
            check_that(
                parsed_failure_date < parsed_sale_date,
                'failure_date', 'failure_before_sale',
                'failure_date ' || parsed_failure_date || ' is before sale_date ' || parsed_sale_date
            ),
            check_that(
                parsed_failure_date < parsed_build_month,
                'failure_date', 'failure_before_build',
                'failure_date ' || parsed_failure_date || ' is before build month ' || strftime(parsed_build_month, '%Y-%m')
            )
        ) as row_problem
    from typed_values
),

claim_id_occurrences as (
    select
        *,
        case
            when row_problem is null
                then row_number() over (partition by claim_id_text, row_problem is null order by source_row_number)
        end as claim_id_occurrence,
        case
            when row_problem is null
                then first_value(source_row_number) over (
                    partition by claim_id_text, row_problem is null order by source_row_number
                )
        end as first_row_with_claim_id
    from row_checks
),

checked_rows as (
    select
        *,
        coalesce(
            row_problem,
            check_that(
                claim_id_occurrence > 1,
                'claim_id', 'duplicate_claim_id',
                'claim_id ' || claim_id_text || ' first appears at row ' || first_row_with_claim_id
            )
        ) as problem
    from claim_id_occurrences
)

select
    source_row_number,
    claim_id_text as claim_id,
    product_text as product,
    parsed_build_month as build_month,
    parsed_sale_date as sale_date,
    parsed_failure_date as failure_date,
    parsed_claim_date as claim_date,
    parsed_cost as cost,
    status_text as status,
    failure_code_text as failure_code,
    serial_text as serial,
    problem is not null as is_quarantined,
    problem.col as problem_column,
    problem.reason as problem_reason,
    problem.detail as problem_detail
from checked_rows
