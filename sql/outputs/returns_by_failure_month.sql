-- returns_by_failure_month: counted in-coverage returns by the calendar month of their failure and of their
-- claim, per product x build month (what a backtest compares its forecasts with).
-- Grain: one row per product x build_month x failure_month x claim_month with at least one counted return.
-- Parameters: none.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, build_month, failure_month, claim_month
-- failure_month / claim_month: the first day of the month of failure_date / claim_date.
with counted_returns as (
    select product, build_month, failure_date, claim_date
    from claims_assigned_to_sale_month_groups
    where is_return
),

returns_by_month as (
    select
        product,
        build_month,
        date_trunc('month', failure_date)::date as failure_month,
        date_trunc('month', claim_date)::date as claim_month
    from counted_returns
)

select
    product,
    build_month,
    failure_month,
    claim_month,
    count(*) as returns
from returns_by_month
group by product, build_month, failure_month, claim_month
