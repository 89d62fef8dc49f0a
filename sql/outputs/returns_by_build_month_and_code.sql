-- returns_by_build_month_and_code: counted in-coverage returns by build month and failure code, for
-- pointing a flagged build month at the failure codes behind its excess.
-- Grain: one row per product x build_month x failure_code with at least one return.
-- Parameters: none.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, build_month, failure_code
-- failure_code is the claim's failure_code, or '(no code)' when the claim has none (as in
-- returns_by_failure_mode).
with counted_returns as (
    select product, build_month, coalesce(failure_code, '(no code)') as failure_code
    from claims_assigned_to_sale_month_groups
    where is_return
)

select
    product,
    build_month,
    failure_code,
    count(*) as returns
from counted_returns
group by product, build_month, failure_code
