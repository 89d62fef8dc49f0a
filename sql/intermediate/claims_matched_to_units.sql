-- claims_matched_to_units: claims filed by the as-of date, checked against the shipments, put on their
-- unit's warranty clock, aged in months in service and assigned to a sale-month group.
-- Grain: one row per valid staged claim with claim_date on or before the as-of date.
-- Parameters: $as_of_date, $counted_statuses (list of statuses that count as returns).
-- Reads: stg_claims, stg_shipments, units_aged_to_as_of, sale_month_groups. Uses macros/validation.
-- Warranty clock of a claim: its own sale_date; else its unit's clock (joined on serial); else the median
-- clock of its product x build month (imputed, counted in the run facts).
-- Months in service: age x = days / (365.25/12) from the clock to failure_date; MIS k = max(1, ceil(x)),
-- the interval (k-1, k]. A claim with MIS beyond the group's warranty_months is out of coverage.
-- Group: the unit's group when joined on serial; else the product x build month group with the same
-- sale month (most units first, then the shorter warranty), else the nearest sale month (earlier first).
-- Referential problems are carried as problem_column / problem_reason / problem_detail (first one wins).
with valid_claims as (
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
    from stg_claims
    where not is_quarantined and claim_date <= $as_of_date
),

shipped_cohorts as (
    select distinct product, build_month
    from stg_shipments
    where not is_quarantined
),

cohorts_in_service as (
    select
        product,
        build_month,
        quantile_disc(warranty_start_date, 0.5) as median_warranty_start_date
    from units_aged_to_as_of
    where not is_in_channel
    group by product, build_month
),

serialised_units as (
    select
        serial,
        product,
        build_month,
        known_sale_date,
        warranty_start_date,
        is_sale_date_imputed,
        sale_month,
        warranty_months
    from units_aged_to_as_of
    where serial is not null
),

claims_with_unit as (
    select
        claim.source_row_number,
        claim.claim_id,
        claim.product,
        claim.build_month,
        claim.sale_date,
        claim.failure_date,
        claim.claim_date,
        claim.cost,
        claim.status,
        claim.failure_code,
        claim.serial,
        unit.serial is not null as is_unit_found,
        unit.product as unit_product,
        unit.build_month as unit_build_month,
        unit.known_sale_date as unit_known_sale_date,
        unit.warranty_start_date as unit_warranty_start_date,
        unit.is_sale_date_imputed as is_unit_sale_date_imputed,
        unit.sale_month as unit_sale_month,
        unit.warranty_months as unit_warranty_months,
        shipped.product is not null as is_cohort_shipped,
        in_service.median_warranty_start_date as cohort_median_warranty_start_date
    from valid_claims as claim
    left join serialised_units as unit on claim.serial = unit.serial
    left join shipped_cohorts as shipped
        on claim.product = shipped.product and claim.build_month = shipped.build_month
    left join cohorts_in_service as in_service
        on claim.product = in_service.product and claim.build_month = in_service.build_month
),

referential_checks as (
    select
        *,
        coalesce(
            check_that(
                not is_cohort_shipped,
                'build_month', 'cohort_never_shipped',
                'no valid shipment of product ' || product || ' build month ' || strftime(build_month, '%Y-%m')
            ),
            check_that(
                cohort_median_warranty_start_date is null,
                'build_month', 'cohort_not_in_service',
                'no unit of product ' || product || ' build month ' || strftime(build_month, '%Y-%m')
                    || ' was in service by ' || $as_of_date::date
            ),
            check_that(
                is_unit_found and (unit_product <> product or unit_build_month <> build_month),
                'serial', 'serial_mismatch',
                'serial ' || serial || ' was shipped as product ' || unit_product || ' build month '
                    || strftime(unit_build_month, '%Y-%m')
            ),
            check_that(
                failure_date < unit_known_sale_date,
                'failure_date', 'failure_before_sale',
                'failure_date ' || failure_date || ' is before the unit''s sale_date ' || unit_known_sale_date
            )
        ) as problem,
        coalesce(sale_date, unit_warranty_start_date, cohort_median_warranty_start_date) as warranty_start_date,
        sale_date is null and (not is_unit_found or is_unit_sale_date_imputed) as is_sale_date_imputed
    from claims_with_unit
),

aged_claims as (
    select
        *,
        date_diff('day', warranty_start_date, failure_date) / (365.25 / 12) as age_months,
        greatest(1, ceil(date_diff('day', warranty_start_date, failure_date) / (365.25 / 12)))::integer
            as months_in_service,
        date_trunc('month', warranty_start_date)::date as claim_sale_month
    from referential_checks
),

candidate_groups as (
    select
        claim.source_row_number,
        sale_group.sale_month,
        sale_group.warranty_months,
        row_number() over (
            partition by claim.source_row_number
            order by
                abs(date_diff('month', sale_group.sale_month, claim.claim_sale_month)),
                sale_group.sale_month,
                sale_group.units desc,
                sale_group.warranty_months
        ) as preference
    from aged_claims as claim
    join sale_month_groups as sale_group
        on claim.product = sale_group.product and claim.build_month = sale_group.build_month
    where claim.problem is null and not claim.is_unit_found and sale_group.units > sale_group.units_in_channel
),

assigned_claims as (
    select
        claim.*,
        case when claim.is_unit_found then claim.unit_sale_month else candidate.sale_month end as sale_month,
        case when claim.is_unit_found then claim.unit_warranty_months else candidate.warranty_months end
            as warranty_months
    from aged_claims as claim
    left join candidate_groups as candidate
        on claim.source_row_number = candidate.source_row_number and candidate.preference = 1
)

select
    source_row_number,
    claim_id,
    product,
    build_month,
    sale_month,
    warranty_months,
    warranty_start_date,
    is_sale_date_imputed,
    problem is null and sale_month <> claim_sale_month as is_group_reassigned,
    serial is not null and not is_unit_found as is_serial_unknown,
    failure_date,
    claim_date,
    cost,
    status,
    failure_code,
    serial,
    age_months,
    months_in_service,
    list_contains($counted_statuses, status) as is_counted_status,
    months_in_service <= warranty_months as is_in_coverage,
    problem is null and list_contains($counted_statuses, status) and months_in_service <= warranty_months
        as is_return,
    problem is not null as is_quarantined,
    problem.col as problem_column,
    problem.reason as problem_reason,
    problem.detail as problem_detail
from assigned_claims
