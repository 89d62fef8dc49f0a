-- returns_by_failure_mode: counted in-coverage returns by failure code, for the failure-mode fits.
-- Grain: one row per product x failure_mode x months_in_service with at least one return.
-- Parameters: none.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, failure_mode, months_in_service
-- failure_mode is the claim's failure_code, or '(no code)' when the claim has none.
with counted_returns as (
    select product, coalesce(failure_code, '(no code)') as failure_mode, months_in_service
    from claims_assigned_to_sale_month_groups
    where is_return
)

select
    product,
    failure_mode,
    months_in_service,
    count(*) as returns
from counted_returns
group by product, failure_mode, months_in_service
