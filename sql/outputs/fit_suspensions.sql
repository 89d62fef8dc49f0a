-- fit_suspensions: units still running at the end of their observation, the right-censored part of the
-- life model's input, and the base of the forecast.
-- Grain: one row per product x build_month x sale_month x warranty_months x warranty_start_date.
-- Parameters: none. Reads: units_aged_to_as_of, sale_month_groups, fit_returns.
-- observed_age_months is the lesser of the age at the as-of date and the warranty length (0 for units
-- still in the channel). A group's survivors (units minus counted returns) are shared among its rows in
-- proportion to units, so suspensions may be fractional.
with units_by_start_date as (
    select
        product,
        build_month,
        sale_month,
        warranty_months,
        warranty_start_date,
        observed_age_months,
        is_in_channel,
        units
    from units_aged_to_as_of
),

units_per_start_date as (
    select
        product,
        build_month,
        sale_month,
        warranty_months,
        warranty_start_date,
        observed_age_months,
        is_in_channel,
        sum(units)::bigint as units
    from units_by_start_date
    group by product, build_month, sale_month, warranty_months, warranty_start_date, observed_age_months, is_in_channel
),

returns_per_group as (
    select product, build_month, sale_month, warranty_months, sum(returns) as returns
    from fit_returns
    group by product, build_month, sale_month, warranty_months
),

survivors_per_group as (
    select
        sale_group.product,
        sale_group.build_month,
        sale_group.sale_month,
        sale_group.warranty_months,
        sale_group.units as group_units,
        coalesce(returned.returns, 0) as group_returns,
        greatest(sale_group.units - coalesce(returned.returns, 0), 0) as group_survivors
    from sale_month_groups as sale_group
    left join returns_per_group as returned
        on sale_group.product = returned.product
        and sale_group.build_month = returned.build_month
        and sale_group.sale_month = returned.sale_month
        and sale_group.warranty_months = returned.warranty_months
)

select
    start_date.product,
    start_date.build_month,
    start_date.sale_month,
    start_date.warranty_months,
    start_date.warranty_start_date,
    start_date.observed_age_months,
    start_date.is_in_channel,
    start_date.units,
    start_date.units::double * survivors.group_survivors / survivors.group_units as suspensions
from units_per_start_date as start_date
join survivors_per_group as survivors
    on start_date.product = survivors.product
    and start_date.build_month = survivors.build_month
    and start_date.sale_month = survivors.sale_month
    and start_date.warranty_months = survivors.warranty_months
