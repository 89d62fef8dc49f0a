-- units_sold_or_in_channel: each shipments row's units split into the part sold by the as-of date and the
-- part still in the channel: the units the life model and the forecast count.
-- Grain: one row per units_aged_to_as_of row x part ('sold', 'in_channel') with units above 0.
-- Parameters: none.
-- Reads: units_aged_to_as_of, claims_checked_against_shipments.
-- The sold part holds units x sold share on the row's clock (warranty_start_date, with its ages); the
-- channel part units x (1 - sold share), age 0, its clock channel_start_date (after the as-of date).
-- A claim filed by the as-of date on a serial (joined to its unit, passing every check) proves that unit
-- was sold: its sold share is 1 (unless the row has no sold clock at all, sold share 0). A row with a
-- known sale date is wholly sold. Sold shares are multiples of 2^-20 (units_aged_to_as_of), so the parts'
-- units are exact binary fractions: a row's parts add up to its units exactly and sums are exact in any
-- order (while units stay below 2^33).
with aged_units as (
    select
        source_row_number,
        product,
        build_month,
        warranty_months,
        units,
        serial,
        sold_share,
        is_sale_date_imputed,
        warranty_start_date,
        sale_month,
        channel_start_date,
        is_in_channel,
        age_months,
        observed_age_months
    from units_aged_to_as_of
),

serials_with_a_claim as (
    select distinct serial
    from claims_checked_against_shipments
    where is_unit_found and not is_quarantined
),

sold_shares_given_claims as (
    select
        aged.*,
        case
            when claimed.serial is not null and not aged.is_in_channel then 1.0::double
            else aged.sold_share
        end as sold_share_given_claims
    from aged_units as aged
    left join serials_with_a_claim as claimed on aged.serial = claimed.serial
),

sold_parts as (
    select
        source_row_number,
        'sold' as part,
        product,
        build_month,
        warranty_months,
        is_sale_date_imputed,
        warranty_start_date,
        sale_month,
        false as is_in_channel,
        units * sold_share_given_claims as units,
        age_months,
        observed_age_months
    from sold_shares_given_claims
    where sold_share_given_claims > 0
),

channel_parts as (
    select
        source_row_number,
        'in_channel' as part,
        product,
        build_month,
        warranty_months,
        is_sale_date_imputed,
        channel_start_date as warranty_start_date,
        date_trunc('month', channel_start_date)::date as sale_month,
        true as is_in_channel,
        units - units * sold_share_given_claims as units,
        0.0::double as age_months,
        0.0::double as observed_age_months
    from sold_shares_given_claims
    where sold_share_given_claims < 1
)

select
    source_row_number,
    part,
    product,
    build_month,
    warranty_months,
    is_sale_date_imputed,
    warranty_start_date,
    sale_month,
    is_in_channel,
    units::double as units,
    age_months,
    observed_age_months
from sold_parts
union all
select
    source_row_number,
    part,
    product,
    build_month,
    warranty_months,
    is_sale_date_imputed,
    warranty_start_date,
    sale_month,
    is_in_channel,
    units::double as units,
    age_months,
    observed_age_months
from channel_parts
