-- age_in_service: the age-in-service matrix (returns by build month and months in service, with the
-- units at risk in each cell), as a long table.
-- Grain: one row per product x build_month x months_in_service with units at risk or returns.
-- Parameters: none.
-- Reads: suspensions_shared_by_start_date, returns_counted_by_group_and_month.
-- Sort: product, build_month, months_in_service
-- units_at_risk: units observed into month k (observed age above its start, month_start_age(k), about
-- k-1; macros/ages.sql) less their share of the returns their group had before month k. units_withdrawn:
-- survivors whose observation ended inside month k (age at the as-of date before its end,
-- month_end_age(k)). return_rate = returns / units_at_risk.
with suspension_rows as (
    select
        product, build_month, sale_month, warranty_months, warranty_start_date, observed_age_months, units,
        suspensions
    from suspensions_shared_by_start_date
),

group_units as (
    select product, build_month, sale_month, warranty_months, sum(units) as units
    from suspension_rows
    group by product, build_month, sale_month, warranty_months
),

months_in_service as (
    select range as months_in_service
    from range(1, (select coalesce(max(warranty_months), 0) + 1 from group_units))
),

group_returns_by_month as (
    select product, build_month, sale_month, warranty_months, months_in_service, returns, return_cost
    from returns_counted_by_group_and_month
),

group_returns_before_month as (
    select
        sale_group.product,
        sale_group.build_month,
        sale_group.sale_month,
        sale_group.warranty_months,
        sale_group.units,
        month.months_in_service,
        coalesce(sum(returned.returns), 0) as returns_before
    from group_units as sale_group
    cross join months_in_service as month
    left join group_returns_by_month as returned
        on sale_group.product = returned.product
        and sale_group.build_month = returned.build_month
        and sale_group.sale_month = returned.sale_month
        and sale_group.warranty_months = returned.warranty_months
        and returned.months_in_service < month.months_in_service
    where month.months_in_service <= sale_group.warranty_months
    group by
        sale_group.product, sale_group.build_month, sale_group.sale_month, sale_group.warranty_months,
        sale_group.units, month.months_in_service
),

-- the units of a group observed into month k: units are sums of exact binary fractions
-- (units_aged_to_as_of), so a plain sum is exact in any order
group_units_into_month as (
    select
        row_.product,
        row_.build_month,
        row_.sale_month,
        row_.warranty_months,
        month.months_in_service,
        sum(row_.units) as units_into_month
    from suspension_rows as row_
    join months_in_service as month
        on month.months_in_service <= row_.warranty_months
        and row_.observed_age_months > month_start_age(month.months_in_service)
    group by row_.product, row_.build_month, row_.sale_month, row_.warranty_months, month.months_in_service
),

-- each row's survivors, withdrawn in the one month its observation ended inside (start < age < end)
withdrawn_by_month as (
    select
        row_.product,
        row_.build_month,
        month.months_in_service,
        -- ordered sum: floating-point sums in a fixed order, so reruns give identical bytes
        sum(row_.suspensions order by row_.sale_month, row_.warranty_months, row_.warranty_start_date)
            as units_withdrawn
    from suspension_rows as row_
    join months_in_service as month
        on month.months_in_service <= row_.warranty_months
        and row_.observed_age_months > month_start_age(month.months_in_service)
        and row_.observed_age_months < month_end_age(month.months_in_service)
    group by row_.product, row_.build_month, month.months_in_service
),

-- a group's units into month k less their share of the group's returns before month k, summed over the
-- product x build month's groups (a few) in a fixed order
at_risk_by_month as (
    select
        into_month.product,
        into_month.build_month,
        into_month.months_in_service,
        sum(
            into_month.units_into_month * (1.0 - least(before.returns_before::double / before.units, 1.0))
            order by into_month.sale_month, into_month.warranty_months
        ) as units_at_risk
    from group_units_into_month as into_month
    join group_returns_before_month as before
        on into_month.product = before.product
        and into_month.build_month = before.build_month
        and into_month.sale_month = before.sale_month
        and into_month.warranty_months = before.warranty_months
        and into_month.months_in_service = before.months_in_service
    group by into_month.product, into_month.build_month, into_month.months_in_service
),

units_at_risk_by_month as (
    select
        at_risk.product,
        at_risk.build_month,
        at_risk.months_in_service,
        at_risk.units_at_risk,
        coalesce(withdrawn.units_withdrawn, 0.0) as units_withdrawn
    from at_risk_by_month as at_risk
    left join withdrawn_by_month as withdrawn
        on at_risk.product = withdrawn.product
        and at_risk.build_month = withdrawn.build_month
        and at_risk.months_in_service = withdrawn.months_in_service
),

returns_by_month as (
    select
        product,
        build_month,
        months_in_service,
        sum(returns) as returns,
        sum(return_cost)::double as return_cost
    from group_returns_by_month
    group by product, build_month, months_in_service
)

select
    coalesce(at_risk.product, returned.product) as product,
    coalesce(at_risk.build_month, returned.build_month) as build_month,
    coalesce(at_risk.months_in_service, returned.months_in_service)::integer as months_in_service,
    coalesce(at_risk.units_at_risk, 0.0) as units_at_risk,
    coalesce(returned.returns, 0)::bigint as returns,
    coalesce(returned.return_cost, 0.0) as return_cost,
    coalesce(at_risk.units_withdrawn, 0.0) as units_withdrawn,
    case
        when coalesce(at_risk.units_at_risk, 0) > 0 then coalesce(returned.returns, 0) / at_risk.units_at_risk
    end as return_rate
from units_at_risk_by_month as at_risk
full outer join returns_by_month as returned
    on at_risk.product = returned.product
    and at_risk.build_month = returned.build_month
    and at_risk.months_in_service = returned.months_in_service
where coalesce(at_risk.units_at_risk, 0) > 0 or coalesce(returned.returns, 0) > 0
