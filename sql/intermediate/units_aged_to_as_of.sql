-- units_aged_to_as_of: shipment rows known at the as-of date, with their warranty clock and age.
-- Grain: one row per valid shipments row with ship_date on or before the as-of date.
-- Parameters: $as_of_date, $default_warranty_months.
-- Reads: stg_shipments.
-- Warranty clock (warranty_start_date): the sale date when known by the as-of date; otherwise the ship
-- date plus the median ship-to-sale lag in days of the product's rows whose two dates are both known by
-- then (all products' rows when the product has none; 0 days when no row has both). A sale date after
-- the as-of date was not yet known then: the row counts as unsold and gets an imputed clock like any
-- other. An imputed clock after the as-of date means the units are still in the channel (age 0).
-- Ages are whole days / (365.25/12) (macros/ages.sql). observed_age_months stops at the end of the
-- warranty's last month in service, month_end_age(warranty_months) (the day grid: 730 days, 23.98 months,
-- for 24 months), so a unit past its warranty is suspended where the counted returns stop.
with valid_shipments as (
    select
        source_row_number,
        product,
        build_month,
        ship_date,
        sale_date,
        units,
        warranty_months,
        serial
    from stg_shipments
    where not is_quarantined
),

shipped_by_as_of as (
    select
        source_row_number,
        product,
        build_month,
        ship_date,
        case when sale_date <= $as_of_date then sale_date end as known_sale_date,
        coalesce(sale_date > $as_of_date, false) as is_sold_after_as_of,
        units,
        coalesce(warranty_months, $default_warranty_months) as warranty_months,
        serial
    from valid_shipments
    where ship_date <= $as_of_date
),

ship_to_sale_lag_by_product as (
    select
        product,
        median(date_diff('day', ship_date, known_sale_date)) as median_lag_days
    from shipped_by_as_of
    where known_sale_date is not null
    group by product
),

ship_to_sale_lag_all_products as (
    select median(date_diff('day', ship_date, known_sale_date)) as median_lag_days
    from shipped_by_as_of
    where known_sale_date is not null
),

clocked_units as (
    select
        shipped.source_row_number,
        shipped.product,
        shipped.build_month,
        shipped.ship_date,
        shipped.known_sale_date,
        shipped.is_sold_after_as_of,
        shipped.units,
        shipped.warranty_months,
        shipped.serial,
        coalesce(
            shipped.known_sale_date,
            shipped.ship_date + round(coalesce(by_product.median_lag_days, all_products.median_lag_days, 0))::integer
        ) as warranty_start_date,
        shipped.known_sale_date is null as is_sale_date_imputed
    from shipped_by_as_of as shipped
    left join ship_to_sale_lag_by_product as by_product on shipped.product = by_product.product
    cross join ship_to_sale_lag_all_products as all_products
)

select
    source_row_number,
    product,
    build_month,
    ship_date,
    known_sale_date,
    is_sold_after_as_of,
    is_sale_date_imputed,
    warranty_start_date,
    date_trunc('month', warranty_start_date)::date as sale_month,
    warranty_months,
    units,
    serial,
    warranty_start_date > $as_of_date as is_in_channel,
    age_of_days(greatest(date_diff('day', warranty_start_date, $as_of_date), 0)) as age_months,
    age_of_days(
        least(greatest(date_diff('day', warranty_start_date, $as_of_date), 0), floor(warranty_months * (365.25 / 12)))
    ) as observed_age_months
from clocked_units
