-- fit_returns: counted in-coverage returns, the interval-censored part of the life model's input.
-- Grain: one row per product x build_month x sale_month x warranty_months x months_in_service that has
-- at least one return. A return in months in service k failed in the age interval (k-1, k] months.
-- Parameters: none. Reads: claims_matched_to_units.
with counted_returns as (
    select product, build_month, sale_month, warranty_months, months_in_service, cost
    from claims_matched_to_units
    where is_return
)

select
    product,
    build_month,
    sale_month,
    warranty_months,
    months_in_service,
    count(*) as returns,
    sum(cost) as return_cost
from counted_returns
group by product, build_month, sale_month, warranty_months, months_in_service
