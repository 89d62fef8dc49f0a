-- repaired_units_under_warranty: units that have had their first counted claim and are still under
-- warranty at the as-of date: the units whose repeat claims are still to come.
-- Grain: one row per product x build_month x warranty_months x months_in_service (of the first claim) x
-- first_failure_month with at least one such unit.
-- Parameters: $as_of_date.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, build_month, warranty_months, months_in_service, first_failure_month
-- A repaired unit is a counted return (is_return: a serial's first counted in-coverage claim, or a claim
-- without a serial, taken as a distinct unit's). Its warranty ends on the last day of month in service
-- warranty_months (warranty start + floor(warranty_months * 365.25/12) days); it is still under warranty
-- when that day is after the as-of date. Ages in months of 365.25/12 days:
-- months_since_first_claim: the units' mean time from the first failure_date to the as-of date;
-- warranty_months_left: their mean time from the first failure_date to the end of the warranty.
-- serialised_units: how many of them carry a serial (the others are units only by assumption).
with returns as (
    select
        product,
        build_month,
        warranty_months,
        months_in_service,
        date_trunc('month', failure_date)::date as first_failure_month,
        serial,
        date_diff('day', failure_date, $as_of_date::date) as days_since_first_claim,
        floor(warranty_months * (365.25 / 12))::bigint - date_diff('day', warranty_start_date, failure_date)
            as days_of_warranty_left
    from claims_assigned_to_sale_month_groups
    where is_return
),

still_under_warranty as (
    select *
    from returns
    where days_of_warranty_left > days_since_first_claim
)

select
    product,
    build_month,
    warranty_months,
    months_in_service,
    first_failure_month,
    count(*) as repaired_units,
    count(serial) as serialised_units,
    sum(days_since_first_claim)::double / count(*) / (365.25 / 12) as months_since_first_claim,
    sum(days_of_warranty_left)::double / count(*) / (365.25 / 12) as warranty_months_left
from still_under_warranty
group by product, build_month, warranty_months, months_in_service, first_failure_month
