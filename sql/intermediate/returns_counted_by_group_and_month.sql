-- returns_counted_by_group_and_month: counted in-coverage returns per sale-month group and month in service.
-- A return is a unit's first counted claim (is_return); a unit's repeat claims are not failed units and
-- are left out (they are counted in repeat_claims_by_age and forecast by stages/repeat_claims.py).
-- Grain: one row per product x build_month x sale_month x warranty_months x months_in_service that has
-- at least one return. A return in months in service k failed in the age interval (k-1, k] months.
-- Parameters: none.
-- Reads: claims_assigned_to_sale_month_groups.
-- return_cost: the returns' cost in currency units.
with counted_returns as (
    select product, build_month, sale_month, warranty_months, months_in_service, cost
    from claims_assigned_to_sale_month_groups
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
