-- cohort_summary: what is known to date about each build month: units, returns and their cost.
-- Grain: one row per product x build_month with units shipped by the as-of date.
-- Parameters: none.
-- Reads: units_aged_to_as_of, units_sold_or_in_channel, claims_assigned_to_sale_month_groups.
-- Sort: product, build_month
-- returns_to_date / cost_to_date: counted in-coverage returns (each unit's first counted claim) and their
-- cost (currency units); repeat_claims_to_date / repeat_cost_to_date: the units' later counted claims and
-- their cost. Claims paid to date = returns_to_date + repeat_claims_to_date.
-- units: whole units shipped by the as-of date; units_sale_date_imputed: those without a sale date known
-- then; units_in_channel: the expected units not sold by then (the channel parts of
-- units_sold_or_in_channel, may be fractional).
with units_per_cohort as (
    select
        product,
        build_month,
        sum(units)::bigint as units,
        sum(case when is_sale_date_imputed then units else 0 end)::bigint as units_sale_date_imputed,
        min(warranty_months) as min_warranty_months,
        max(warranty_months) as max_warranty_months
    from units_aged_to_as_of
    group by product, build_month
),

units_in_channel_per_cohort as (
    select
        product,
        build_month,
        sum(case when is_in_channel then units else 0 end)::double as units_in_channel
    from units_sold_or_in_channel
    group by product, build_month
),

claims_per_cohort as (
    select
        product,
        build_month,
        count(*) filter (where is_return) as returns_to_date,
        coalesce(sum(cost) filter (where is_return), 0)::double as cost_to_date,
        count(*) filter (where is_repeat_claim) as repeat_claims_to_date,
        coalesce(sum(cost) filter (where is_repeat_claim), 0)::double as repeat_cost_to_date,
        count(*) filter (where is_counted_status and not is_in_coverage) as claims_out_of_coverage,
        count(*) filter (where not is_counted_status) as claims_not_counted
    from claims_assigned_to_sale_month_groups
    where not is_quarantined
    group by product, build_month
)

select
    units_per_cohort.product,
    units_per_cohort.build_month,
    units_per_cohort.units,
    coalesce(units_in_channel_per_cohort.units_in_channel, 0.0) as units_in_channel,
    units_per_cohort.units_sale_date_imputed,
    units_per_cohort.min_warranty_months,
    units_per_cohort.max_warranty_months,
    coalesce(claims_per_cohort.returns_to_date, 0) as returns_to_date,
    coalesce(claims_per_cohort.cost_to_date, 0.0) as cost_to_date,
    coalesce(claims_per_cohort.repeat_claims_to_date, 0) as repeat_claims_to_date,
    coalesce(claims_per_cohort.repeat_cost_to_date, 0.0) as repeat_cost_to_date,
    coalesce(claims_per_cohort.claims_out_of_coverage, 0) as claims_out_of_coverage,
    coalesce(claims_per_cohort.claims_not_counted, 0) as claims_not_counted
from units_per_cohort
left join units_in_channel_per_cohort
    on units_per_cohort.product = units_in_channel_per_cohort.product
    and units_per_cohort.build_month = units_in_channel_per_cohort.build_month
left join claims_per_cohort
    on units_per_cohort.product = claims_per_cohort.product
    and units_per_cohort.build_month = claims_per_cohort.build_month
