-- stg_claims: the claims extract typed and checked, row by row (checks that need the shipments are in
-- intermediate/claims_matched_to_units.sql).
-- Grain: one row per data row of the claims file (one claim).
-- Parameters: none.
-- Reads: raw_claims (every contract column as text, plus source_row_number).
-- A row that fails a check carries the FIRST failed check, in the order written below, as
-- problem_column / problem_reason (a stable code) / problem_detail (for people); valid rows carry nulls.
-- status is case-insensitive and defaults to approved when empty.
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
        case
            when regexp_full_match(build_month_text, '\d{4}-\d{2}')
                then try_strptime(build_month_text, '%Y-%m')::date
            else date_trunc('month', try_cast(build_month_text as date))::date
        end as parsed_build_month,
        try_cast(sale_date_text as date) as parsed_sale_date,
        try_cast(failure_date_text as date) as parsed_failure_date,
        try_cast(claim_date_text as date) as parsed_claim_date,
        try_cast(cost_text as decimal(18, 2)) as parsed_cost
    from trimmed_text
),

row_checks as (
    select
        *,
        case
            when claim_id_text is null
                then {'col': 'claim_id', 'reason': 'missing_value', 'detail': 'claim_id is empty'}
            when product_text is null
                then {'col': 'product', 'reason': 'missing_value', 'detail': 'product is empty'}
            when build_month_text is null
                then {'col': 'build_month', 'reason': 'missing_value', 'detail': 'build_month is empty'}
            when parsed_build_month is null
                then {'col': 'build_month', 'reason': 'unparseable_value',
                      'detail': 'build_month ' || build_month_text || ' is not YYYY-MM or a date'}
            when failure_date_text is null
                then {'col': 'failure_date', 'reason': 'missing_value', 'detail': 'failure_date is empty'}
            when parsed_failure_date is null
                then {'col': 'failure_date', 'reason': 'unparseable_value',
                      'detail': 'failure_date ' || failure_date_text || ' is not a date'}
            when claim_date_text is null
                then {'col': 'claim_date', 'reason': 'missing_value', 'detail': 'claim_date is empty'}
            when parsed_claim_date is null
                then {'col': 'claim_date', 'reason': 'unparseable_value',
                      'detail': 'claim_date ' || claim_date_text || ' is not a date'}
            when sale_date_text is not null and parsed_sale_date is null
                then {'col': 'sale_date', 'reason': 'unparseable_value',
                      'detail': 'sale_date ' || sale_date_text || ' is not a date'}
            when cost_text is null
                then {'col': 'cost', 'reason': 'missing_value', 'detail': 'cost is empty'}
            when parsed_cost is null
                then {'col': 'cost', 'reason': 'unparseable_value',
                      'detail': 'cost ' || cost_text || ' is not a decimal number'}
            when parsed_cost < 0
                then {'col': 'cost', 'reason': 'negative_cost', 'detail': 'cost ' || cost_text || ' is negative'}
            when status_text not in ('approved', 'rejected', 'no_fault_found')
                then {'col': 'status', 'reason': 'unknown_status',
                      'detail': 'status ' || status_text || ' is not approved, rejected or no_fault_found'}
            when parsed_claim_date < parsed_failure_date
                then {'col': 'claim_date', 'reason': 'claim_before_failure',
                      'detail': 'claim_date ' || parsed_claim_date || ' is before failure_date ' || parsed_failure_date}
            when parsed_failure_date < parsed_sale_date
                then {'col': 'failure_date', 'reason': 'failure_before_sale',
                      'detail': 'failure_date ' || parsed_failure_date || ' is before sale_date ' || parsed_sale_date}
            when parsed_failure_date < parsed_build_month
                then {'col': 'failure_date', 'reason': 'failure_before_build',
                      'detail': 'failure_date ' || parsed_failure_date || ' is before build month '
                          || strftime(parsed_build_month, '%Y-%m')}
        end as row_problem
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
            case
                when claim_id_occurrence > 1
                    then {'col': 'claim_id', 'reason': 'duplicate_claim_id',
                          'detail': 'claim_id ' || claim_id_text || ' first appears at row ' || first_row_with_claim_id}
            end
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
