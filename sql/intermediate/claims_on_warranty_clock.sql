-- claims_on_warranty_clock: each claim checked against the shipments, put on its warranty clock and aged
-- in months in service at its failure.
-- Grain: one row per row of claims_checked_against_shipments (quarantined claims included).
-- Parameters: none.
-- Reads: claims_checked_against_shipments.
-- Warranty clock of a claim: its own sale_date; else its unit's clock (joined on serial); else the median
-- clock of its product x build month (imputed, counted in the run facts).
-- Months in service: age x = days / (365.25/12) from the clock to failure_date; MIS k = max(1, ceil(x)).
-- On the day grid (macros/ages.sql) month k holds the ages (month_start_age(k), month_end_age(k)]. claim_sale_month is the month the clock started.
with checked_claims as (
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
        serial,
        is_unit_found,
        unit_warranty_start_date,
        is_unit_sale_date_imputed,
        unit_sale_month,
        unit_warranty_months,
        cohort_median_warranty_start_date,
        is_quarantined,
        problem_column,
        problem_reason,
        problem_detail
    from claims_checked_against_shipments
),

clocked_claims as (
    select
        *,
        coalesce(sale_date, unit_warranty_start_date, cohort_median_warranty_start_date) as warranty_start_date,
        sale_date is null and (not is_unit_found or is_unit_sale_date_imputed) as is_sale_date_imputed
    from checked_claims
),

aged_claims as (
    select
        *,
        age_of_days(date_diff('day', warranty_start_date, failure_date)) as age_months
    from clocked_claims
)

select
    source_row_number,
    claim_id,
    product,
    build_month,
    failure_date,
    claim_date,
    cost,
    status,
    failure_code,
    serial,
    is_unit_found,
    unit_sale_month,
    unit_warranty_months,
    warranty_start_date,
    is_sale_date_imputed,
    date_trunc('month', warranty_start_date)::date as claim_sale_month,
    age_months,
    greatest(1, ceil(age_months))::integer as months_in_service,
    is_quarantined,
    problem_column,
    problem_reason,
    problem_detail
from aged_claims
