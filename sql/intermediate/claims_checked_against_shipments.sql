-- claims_checked_against_shipments: claims filed by the as-of date, joined to their unit (by serial) and
-- their cohort (product x build month), with the first check against the shipments that fails.
-- Grain: one row per valid staged claim with claim_date on or before the as-of date.
-- Parameters: $as_of_date.
-- Reads: stg_claims, stg_shipments, units_aged_to_as_of.
-- Checks in the order written (first failed wins; macros/validation): the cohort has a valid shipment; a
-- unit of the cohort is in service by the as-of date; a serial found names a unit of the same cohort; the
-- failure is not before the unit's known sale date. The failed check is carried as problem_column /
-- problem_reason / problem_detail (nulls when every check passes).
-- cohort_median_warranty_start_date: the median clock of the cohort's units in service (lower median).
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

claims_with_unit_and_cohort as (
    select
        claim.*,
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

checked_claims as (
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
        ) as problem
    from claims_with_unit_and_cohort
)

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
    problem is not null as is_quarantined,
    problem.col as problem_column,
    problem.reason as problem_reason,
    problem.detail as problem_detail
from checked_claims
