-- claims_by_claim_date: the claims filed each day that cost money, for the roll-forward's claims settled
-- since the opening run's as-of date (stages.roll_forward).
-- Grain: one row per product x claim_date with at least one valid claim filed on or before the as-of date.
-- Parameters: none.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product, claim_date
-- settled_claims / settled_cost: counted claims (returns and repeat claims, in coverage) that are decided,
-- not open, and their cost (currency units); handled_claims: valid claims with status rejected or
-- no_fault_found whose status is not counted (as the reserve's handling ratio counts them; priced at
-- reserve.handling_cost_per_claim), in or out of coverage.
with valid_claims as (
    select
        product, claim_date, status, cost, is_open_claim, is_counted_status,
        is_return or is_repeat_claim as is_counted_claim
    from claims_assigned_to_sale_month_groups
    where not is_quarantined
)

select
    product,
    claim_date,
    count(*) filter (where is_counted_claim and not is_open_claim)::bigint as settled_claims,
    coalesce(sum(cost) filter (where is_counted_claim and not is_open_claim), 0)::double as settled_cost,
    count(*) filter (where status in ('rejected', 'no_fault_found') and not is_counted_status)::bigint as handled_claims
from valid_claims
group by product, claim_date
