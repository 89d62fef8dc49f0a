-- returns_by_failure_mode: counted in-coverage returns by failure code, for the failure-mode fits.
-- Grain: one row per product x build_month x failure_mode x months_in_service with at least one return
-- (build_month lets the fits leave flagged build months out).
-- Parameters: none.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, failure_mode, build_month, months_in_service
-- failure_mode is the claim's failure_code, or '(no code)' when the claim has none.
with counted_returns as (
    select product, build_month, coalesce(failure_code, '(no code)') as failure_mode, months_in_service
    from claims_assigned_to_sale_month_groups
    where is_return
)

select
    product,
    build_month,
    failure_mode,
    months_in_service,
    count(*) as returns
from counted_returns
group by product, build_month, failure_mode, months_in_service
