-- suspensions_shared_by_start_date: units still running at the end of their observation, the
-- right-censored part of the life model's input, and the base of the forecast.
-- Grain: one row per product x build_month x sale_month x warranty_months x warranty_start_date.
-- Parameters: none.
-- Reads: units_sold_or_in_channel, sale_month_group_survivors.
-- observed_age_months is the lesser of the age at the as-of date and the end of the warranty's last month
-- in service (month_end_age(warranty_months), macros/ages.sql) (0 for units
-- still in the channel). units are the sold and channel parts of units_sold_or_in_channel (expected
-- counts, may be fractional). A group's survivors (units minus counted returns) are shared among its rows
-- in proportion to units, so suspensions may be fractional.
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
    from units_sold_or_in_channel
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
        sum(units)::double as units
    from units_by_start_date
    group by product, build_month, sale_month, warranty_months, warranty_start_date, observed_age_months, is_in_channel
),

group_survivors as (
    select product, build_month, sale_month, warranty_months, group_units, group_survivors
    from sale_month_group_survivors
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
join group_survivors as survivors
    on start_date.product = survivors.product
    and start_date.build_month = survivors.build_month
    and start_date.sale_month = survivors.sale_month
    and start_date.warranty_months = survivors.warranty_months
