-- repeat_claims_by_age: repeat claims of serialised units repaired under warranty, and those units' time at
-- risk of one, by months since the unit's first counted claim: what the repeat-claims model (the mean
-- cumulative function of Nelson) is estimated from.
-- Grain: one row per product x months_since_first_claim with units at risk or repeat claims.
-- Parameters: $as_of_date.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, months_since_first_claim
-- A serialised repaired unit: a serial (within its product x build month) whose first counted in-coverage
-- claim (is_return) is known; claims without a serial cannot be followed and are left out. The unit is at
-- risk of a repeat claim from its first failure_date until the earlier of the as-of date and the end of
-- its warranty (the last day of month in service warranty_months: warranty start + floor(warranty_months *
-- 365.25/12) days). Months since the first claim u = days / (365.25/12) from the first failure_date; month j
-- holds u in (j-1, j] (a repeat on the same day counts in month 1).
-- units_at_risk: units observed into month j (u at the end of observation above j-1); unit_months_at_risk:
-- their time at risk inside month j (months: 1 per unit observed through it, the fraction for a unit whose
-- observation ends inside it); repeat_claims / repeat_cost: counted in-coverage claims after the unit's
-- first, and their cost (currency units).
with counted_claims as (
    select
        product,
        build_month,
        serial,
        warranty_months,
        warranty_start_date,
        failure_date,
        cost,
        is_return,
        is_repeat_claim
    from claims_assigned_to_sale_month_groups
    where serial is not null and (is_return or is_repeat_claim)
),

repaired_units as (
    select
        product,
        build_month,
        serial,
        failure_date as first_failure_date,
        greatest(
            least(
                date_diff('day', failure_date, $as_of_date::date),
                floor(warranty_months * (365.25 / 12)) - date_diff('day', warranty_start_date, failure_date)
            ),
            0
        ) / (365.25 / 12) as months_observed
    from counted_claims
    where is_return
),

repeat_claims as (
    select
        unit.product,
        greatest(1, ceil(date_diff('day', unit.first_failure_date, claim.failure_date) / (365.25 / 12)))::integer
            as months_since_first_claim,
        claim.cost
    from counted_claims as claim
    join repaired_units as unit
        on claim.product = unit.product
        and claim.build_month = unit.build_month
        and claim.serial = unit.serial
    where claim.is_repeat_claim
),

months_observed_per_unit as (
    select
        product,
        build_month,
        serial,
        months_observed,
        unnest(range(1, ceil(months_observed)::bigint + 1)) as months_since_first_claim
    from repaired_units
),

time_at_risk as (
    select
        product,
        months_since_first_claim,
        count(*) as units_at_risk,
        -- ordered sums: floating-point sums in a fixed order, so reruns give identical bytes
        sum(least(months_observed - (months_since_first_claim - 1), 1.0) order by build_month, serial)
            as unit_months_at_risk
    from months_observed_per_unit
    group by product, months_since_first_claim
),

repeats_by_month as (
    select
        product,
        months_since_first_claim,
        count(*) as repeat_claims,
        sum(cost)::double as repeat_cost
    from repeat_claims
    group by product, months_since_first_claim
)

select
    coalesce(at_risk.product, repeated.product) as product,
    coalesce(at_risk.months_since_first_claim, repeated.months_since_first_claim)::integer
        as months_since_first_claim,
    coalesce(at_risk.units_at_risk, 0)::bigint as units_at_risk,
    coalesce(at_risk.unit_months_at_risk, 0.0)::double as unit_months_at_risk,
    coalesce(repeated.repeat_claims, 0)::bigint as repeat_claims,
    coalesce(repeated.repeat_cost, 0.0) as repeat_cost
from time_at_risk as at_risk
full outer join repeats_by_month as repeated
    on at_risk.product = repeated.product
    and at_risk.months_since_first_claim = repeated.months_since_first_claim
