-- ship_to_sale_lag_distribution: each product's ship-to-sale lag distribution G (the share of sold units
-- whose lag is at most lag_days) and the share m of sold units whose sale date the extract never carries:
-- what the sale-date imputation of units_aged_to_as_of needs.
-- Grain: one row per product with a valid shipments row shipped by the as-of date x lag_days (each lag
-- of the rows its estimate uses; a single row with lag_days 0 when no row has both dates).
-- Parameters: $as_of_date.
-- Reads: stg_shipments.
-- A lag is whole days from ship_date to a sale_date known by the as-of date (a sale date after it was not
-- known then). Mature rows were shipped at least the longest such lag before the as-of date (the
-- product's longest, or every product's for the pooled estimate): any lag up to it could have been seen,
-- so their known lags are not cut short by the as-of date, and their units without a known sale date are
-- sold units whose sale date was never reported (G ~ 1 there).
-- estimate_basis, the first with a known lag (G and m weighted by units):
--   product_mature_rows: G from the product's mature rows with a known sale date; m = units of its mature
--     rows without one / units of its mature rows (the row with the longest lag is itself mature, so a
--     product with any known lag has this estimate);
--   all_products_mature_rows: a product without a known lag: the same over every product's mature rows;
--   no_rows_with_both_dates: no row has both dates: lag 0 days (a unit sells the day it ships) and m = 1
--     (nothing says how many sold units lack a sale date: a missing one is taken to say nothing).
-- share_sold_by_lag is cumulative over lag_days within a product and reaches exactly 1 at its longest lag.
with valid_shipments as (
    select product, ship_date, sale_date, units
    from stg_shipments
    where not is_quarantined
),

shipped_by_as_of as (
    select
        product,
        units,
        date_diff('day', ship_date, $as_of_date) as days_since_shipped,
        case when sale_date <= $as_of_date then date_diff('day', ship_date, sale_date) end as known_lag_days
    from valid_shipments
    where ship_date <= $as_of_date
),

products_shipped as (
    select distinct product
    from shipped_by_as_of
),

longest_known_lag_by_product as (
    select product, max(known_lag_days) as longest_lag_days
    from shipped_by_as_of
    group by product
),

longest_known_lag_all_products as (
    select max(known_lag_days) as longest_lag_days
    from shipped_by_as_of
),

mature_rows_by_product as (
    select shipped.product, shipped.units, shipped.known_lag_days, longest.longest_lag_days
    from shipped_by_as_of as shipped
    join longest_known_lag_by_product as longest on shipped.product = longest.product
    where shipped.days_since_shipped >= longest.longest_lag_days
),

mature_rows_all_products as (
    select shipped.units, shipped.known_lag_days, longest.longest_lag_days
    from shipped_by_as_of as shipped
    cross join longest_known_lag_all_products as longest
    where shipped.days_since_shipped >= longest.longest_lag_days
),

missing_sale_date_share_of_mature_rows_by_product as (
    select
        product,
        coalesce(sum(units) filter (where known_lag_days is null), 0)::double / sum(units)
            as missing_sale_date_share
    from mature_rows_by_product
    group by product
),

missing_sale_date_share_of_mature_rows_all_products as (
    select
        coalesce(sum(units) filter (where known_lag_days is null), 0)::double / sum(units)
            as missing_sale_date_share
    from mature_rows_all_products
),

-- the pooled lags, summed once (then offered to every product: products x lags, not products x rows)
pooled_lag_units as (
    select
        max(longest_lag_days) as maturity_days,
        known_lag_days as lag_days,
        sum(units) as lag_units
    from mature_rows_all_products
    where known_lag_days is not null
    group by known_lag_days
),

lag_units_by_basis as (
    select
        product,
        1 as basis_rank,
        'product_mature_rows' as estimate_basis,
        max(longest_lag_days) as maturity_days,
        known_lag_days as lag_days,
        sum(units) as lag_units
    from mature_rows_by_product
    where known_lag_days is not null
    group by product, known_lag_days

    union all

    select
        products.product,
        2 as basis_rank,
        'all_products_mature_rows' as estimate_basis,
        pooled.maturity_days,
        pooled.lag_days,
        pooled.lag_units
    from products_shipped as products
    cross join pooled_lag_units as pooled

    union all

    select
        product,
        3 as basis_rank,
        'no_rows_with_both_dates' as estimate_basis,
        null as maturity_days,
        0 as lag_days,
        1 as lag_units
    from products_shipped
),

chosen_basis_by_product as (
    select product, min(basis_rank) as basis_rank
    from lag_units_by_basis
    group by product
),

chosen_lag_units as (
    select lag.product, lag.basis_rank, lag.estimate_basis, lag.maturity_days, lag.lag_days, lag.lag_units
    from lag_units_by_basis as lag
    join chosen_basis_by_product as chosen
        on lag.product = chosen.product and lag.basis_rank = chosen.basis_rank
),

lag_distribution as (
    select
        product,
        basis_rank,
        estimate_basis,
        maturity_days,
        lag_days,
        lag_units,
        -- integer running sums: the share at the longest lag is exactly 1
        (sum(lag_units) over (partition by product order by lag_days))::double
            / sum(lag_units) over (partition by product) as share_sold_by_lag
    from chosen_lag_units
)

select
    lag.product,
    lag.estimate_basis,
    lag.maturity_days::integer as maturity_days,
    lag.lag_days::integer as lag_days,
    lag.lag_units::bigint as lag_units,
    lag.share_sold_by_lag,
    case lag.basis_rank
        when 1 then by_product.missing_sale_date_share
        when 2 then all_products.missing_sale_date_share
        else 1.0::double
    end as missing_sale_date_share
from lag_distribution as lag
left join missing_sale_date_share_of_mature_rows_by_product as by_product on lag.product = by_product.product
cross join missing_sale_date_share_of_mature_rows_all_products as all_products
