-- units_aged_to_as_of: shipment rows known at the as-of date, with their warranty clock and age.
-- Grain: one row per valid shipments row with ship_date on or before the as-of date.
-- Parameters: $as_of_date, $default_warranty_months.
-- Reads: stg_shipments, ship_to_sale_lag_distribution.
-- A row with a sale date known by the as-of date is sold: sold_share 1, its clock (warranty_start_date)
-- the sale date. A row without one (no sale date, or one after the as-of date, not known then), shipped
-- D days before the as-of date, was either sold with its sale date never reported (a share m of sold
-- units) or not sold yet (lag above D). With G the product's lag distribution and m its missing share
-- (ship_to_sale_lag_distribution), sold_share = m G(D) / (m G(D) + 1 - G(D)) (1 when G(D) = 1: no lag
-- seen is longer), rounded to a multiple of 2^-20 so the sold and channel parts of units are exact binary
-- fractions (their sums are exact in any order). The sold part's clock is ship_date + the lower median
-- lag given a lag of at most D (the smallest lag l with G(l) >= G(D) / 2, so on or before the as-of
-- date); the channel part's, channel_start_date, is ship_date + the lower median lag given a lag above D
-- (G(l) >= (1 + G(D)) / 2, after the as-of date; NULL when sold_share is 1). warranty_start_date is the
-- sold part's clock, or the channel clock when sold_share is 0 (then is_in_channel: age 0).
-- units_sold_or_in_channel splits the rows into the two parts.
-- Ages on the day grid (macros/ages.sql): the start date is day 1 of service, so a unit D days past its
-- start at the as-of date has been in service D + 1 days (age_through_day; a unit sold on the as-of date,
-- one day). observed_age_months stops at the end of the warranty's last month in service,
-- month_end_age(warranty_months) (731 days, 24.02 months, for 24 months: the day counts 0 .. 730 are
-- months 1 .. 24), so a unit past its warranty is suspended where the counted returns stop.
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

lag_distribution as (
    select product, lag_days, share_sold_by_lag, missing_sale_date_share
    from ship_to_sale_lag_distribution
),

unsold_or_unreported_rows as (
    select
        source_row_number,
        product,
        date_diff('day', ship_date, $as_of_date) as days_since_shipped
    from shipped_by_as_of
    where known_sale_date is null
),

-- the imputation depends on a row only through its product and days since shipped: it is worked out once per
-- (product, days_since_shipped) and joined back to the rows on those two (a few thousand pairs, not every row
-- against every lag)
unreported_days as (
    select distinct product, days_since_shipped
    from unsold_or_unreported_rows
),

share_sold_by_days_since_shipped as (
    -- G(D): the share at the longest lag of at most D days (0 when every lag is longer; then m does not
    -- matter). The product's m is on each of its lag rows.
    select
        unreported.product,
        unreported.days_since_shipped,
        coalesce(max(lag.share_sold_by_lag), 0.0)::double as share_sold_by_as_of,
        coalesce(max(lag.missing_sale_date_share), 1.0)::double as missing_sale_date_share
    from unreported_days as unreported
    left join lag_distribution as lag
        on unreported.product = lag.product and lag.lag_days <= unreported.days_since_shipped
    group by unreported.product, unreported.days_since_shipped
),

sold_share_by_days_since_shipped as (
    select
        product,
        days_since_shipped,
        share_sold_by_as_of,
        case
            when share_sold_by_as_of >= 1.0 then 1.0::double
            else round(
                missing_sale_date_share * share_sold_by_as_of
                    / (missing_sale_date_share * share_sold_by_as_of + 1.0 - share_sold_by_as_of)
                    * 1048576
            ) / 1048576
        end as sold_share
    from share_sold_by_days_since_shipped
),

sold_part_lag_by_days as (
    select sold.product, sold.days_since_shipped, min(lag.lag_days) as sold_lag_days
    from sold_share_by_days_since_shipped as sold
    join lag_distribution as lag
        on sold.product = lag.product and lag.share_sold_by_lag >= sold.share_sold_by_as_of / 2
    where sold.sold_share > 0
    group by sold.product, sold.days_since_shipped
),

channel_part_lag_by_days as (
    select sold.product, sold.days_since_shipped, min(lag.lag_days) as channel_lag_days
    from sold_share_by_days_since_shipped as sold
    join lag_distribution as lag
        on sold.product = lag.product and lag.share_sold_by_lag >= (1.0 + sold.share_sold_by_as_of) / 2
    where sold.sold_share < 1
    group by sold.product, sold.days_since_shipped
),

sold_share_of_unreported_rows as (
    select
        unreported.source_row_number,
        shares.sold_share,
        sold_part.sold_lag_days,
        channel_part.channel_lag_days
    from unsold_or_unreported_rows as unreported
    join sold_share_by_days_since_shipped as shares
        on unreported.product = shares.product and unreported.days_since_shipped = shares.days_since_shipped
    left join sold_part_lag_by_days as sold_part
        on unreported.product = sold_part.product and unreported.days_since_shipped = sold_part.days_since_shipped
    left join channel_part_lag_by_days as channel_part
        on unreported.product = channel_part.product
        and unreported.days_since_shipped = channel_part.days_since_shipped
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
        coalesce(sold.sold_share, 1.0::double) as sold_share,
        coalesce(
            shipped.known_sale_date,
            shipped.ship_date + sold.sold_lag_days,
            shipped.ship_date + sold.channel_lag_days
        ) as warranty_start_date,
        shipped.ship_date + sold.channel_lag_days as channel_start_date,
        shipped.known_sale_date is null as is_sale_date_imputed
    from shipped_by_as_of as shipped
    left join sold_share_of_unreported_rows as sold on shipped.source_row_number = sold.source_row_number
)

select
    source_row_number,
    product,
    build_month,
    ship_date,
    known_sale_date,
    is_sold_after_as_of,
    is_sale_date_imputed,
    sold_share,
    warranty_start_date,
    channel_start_date,
    date_trunc('month', warranty_start_date)::date as sale_month,
    warranty_months,
    units,
    serial,
    warranty_start_date > $as_of_date as is_in_channel,
    case
        when warranty_start_date > $as_of_date then 0.0
        else age_through_day(date_diff('day', warranty_start_date, $as_of_date))
    end as age_months,
    case
        when warranty_start_date > $as_of_date then 0.0
        else least(age_through_day(date_diff('day', warranty_start_date, $as_of_date)), month_end_age(warranty_months))
    end as observed_age_months
from clocked_units
