-- sale_month_group_survivors: each sale-month group's units, its counted returns and the units that
-- survived them.
-- Grain: one row per product x build_month x sale_month x warranty_months (every row of sale_month_groups).
-- Parameters: none.
-- Reads: sale_month_groups, returns_counted_by_group_and_month.
-- group_survivors = units - returns, never below 0 (a group may hold more returns than units: counted in
-- the run facts). Returns are units' first counted claims, so a unit repaired several times leaves the
-- survivors once.
with returns_per_group as (
    select product, build_month, sale_month, warranty_months, sum(returns) as returns
    from returns_counted_by_group_and_month
    group by product, build_month, sale_month, warranty_months
),

groups_with_returns as (
    select
        sale_group.product,
        sale_group.build_month,
        sale_group.sale_month,
        sale_group.warranty_months,
        sale_group.units as group_units,
        coalesce(returned.returns, 0) as group_returns
    from sale_month_groups as sale_group
    left join returns_per_group as returned
        on sale_group.product = returned.product
        and sale_group.build_month = returned.build_month
        and sale_group.sale_month = returned.sale_month
        and sale_group.warranty_months = returned.warranty_months
)

select
    product,
    build_month,
    sale_month,
    warranty_months,
    group_units,
    group_returns,
    greatest(group_units - group_returns, 0) as group_survivors
from groups_with_returns
