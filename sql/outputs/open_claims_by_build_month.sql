-- open_claims_by_build_month: the counted claims not yet decided (status open or pending), per build month:
-- a known liability the reserve books at its estimate.
-- Grain: one row per product x build_month with at least one counted in-coverage open claim.
-- Parameters: none.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, build_month
-- open_claims: counted open claims (returns and repeat claims); estimated_cost: the sum of their
-- estimates (currency units, the extract's cost of each open claim that gives one); open_claims_without_estimate:
-- those whose cost was left empty (the reserve prices them at the product's cost per claim).
with open_claims as (
    select product, build_month, estimated_cost
    from claims_assigned_to_sale_month_groups
    where (is_return or is_repeat_claim) and is_open_claim
)

select
    product,
    build_month,
    count(*) as open_claims,
    coalesce(sum(estimated_cost), 0)::double as estimated_cost,
    count(*) filter (where estimated_cost is null) as open_claims_without_estimate
from open_claims
group by product, build_month
