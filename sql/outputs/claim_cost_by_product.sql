-- claim_cost_by_product: the observed cost of a settled counted claim, per product: first claims (returns)
-- and repeat claims of the same units alike, as the reserve prices both; and the claims handled without
-- a payout (rejected, no_fault_found) beside them.
-- Grain: one row per product with at least one settled counted in-coverage claim.
-- Parameters: $as_of_date, $cost_window_months.
-- Reads: claims_assigned_to_sale_month_groups.
-- Sort: product
-- window_mean_cost: mean cost (currency units) of settled counted claims filed in the trailing window
-- ending at the as-of date; all_time_mean_cost: over every settled counted claim filed by the as-of date
-- (the columns keep their names: window_returns and all_time_returns count those claims); window_cost_sd,
-- all_time_cost_sd: the sample standard deviation of those costs (NULL for a single claim), the spread of
-- single claims that the reserve's prediction interval carries. Open claims (filed, not decided) are left
-- out: their cost is an estimate, not a settled cost.
-- window_handled_claims, all_time_handled_claims: valid claims with status rejected or no_fault_found that
-- are not counted (in or out of coverage), filed in the same window / by the as-of date: the reserve's
-- handling cost is reserved on their ratio to the settled counted claims of the same period.
with settled_counted_claims as (
    select product, claim_date, cost
    from claims_assigned_to_sale_month_groups
    where (is_return or is_repeat_claim) and not is_open_claim
),

handled_claims as (
    select product, claim_date
    from claims_assigned_to_sale_month_groups
    where not is_quarantined and not is_counted_status and status in ('rejected', 'no_fault_found')
),

window_start as (
    select ($as_of_date::date - to_months($cost_window_months))::date as first_excluded_date
),

claim_costs as (
    select
        product,
        count(*) filter (where claim_date > window_start.first_excluded_date) as window_returns,
        avg(cost) filter (where claim_date > window_start.first_excluded_date)::double as window_mean_cost,
        stddev_samp(cost) filter (where claim_date > window_start.first_excluded_date)::double as window_cost_sd,
        count(*) as all_time_returns,
        avg(cost)::double as all_time_mean_cost,
        stddev_samp(cost)::double as all_time_cost_sd
    from settled_counted_claims
    cross join window_start
    group by product
),

handled_counts as (
    select
        product,
        count(*) filter (where claim_date > window_start.first_excluded_date) as window_handled_claims,
        count(*) as all_time_handled_claims
    from handled_claims
    cross join window_start
    group by product
)

select
    claim_costs.product,
    claim_costs.window_returns,
    claim_costs.window_mean_cost,
    claim_costs.window_cost_sd,
    claim_costs.all_time_returns,
    claim_costs.all_time_mean_cost,
    claim_costs.all_time_cost_sd,
    coalesce(handled_counts.window_handled_claims, 0) as window_handled_claims,
    coalesce(handled_counts.all_time_handled_claims, 0) as all_time_handled_claims
from claim_costs
left join handled_counts on claim_costs.product = handled_counts.product
